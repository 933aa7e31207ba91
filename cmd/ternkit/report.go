package main

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"ternkit/internal/atomicfile"
	"ternkit/report"
)

func newReportCmd() *cobra.Command {
	var out string
	cmd := &cobra.Command{
		Use:   "report ARTIFACT -o OUT.html",
		Short: "Write a self-contained HTML page describing an artifact",
		Long: `report reads an artifact's manifest and writes one HTML page to OUT: summary
cards (sizes, ratio, ternary weights, bits per weight, zero trits, weight
memory against F16, largest error), a chart of bits per weight and zero
trits per layer, a chart of each ternary tensor's relative error, a table of
every tensor, the recipe, the provenance and the cautions. The page loads
nothing from anywhere (no script, no font, no network); open it in any
browser or attach it to a release review. It is written atomically.

Like inspect, report checks the manifest hash but not the sections: run
verify for that. The page describes the packing, not task quality.`,
		Example: `  ternkit report model.tkart -o model.html
  ternkit demo --dir /tmp/scout && ternkit report /tmp/scout/fernmoss-scout-mini.tkart -o /tmp/scout/report.html`,
		Args:              exactArgs(1),
		ValidArgsFunction: artifactCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" {
				return usagef("report needs -o OUT.html (the page to write)")
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() {
				return usagef("-o %q is a directory; give the page's file name, e.g. %s", out, filepath.Join(out, "report.html"))
			}
			if err := checkOutput(out, args[0]); err != nil {
				return err
			}
			return writeReport(cmd.OutOrStdout(), args[0], out)
		},
	}
	cmd.Flags().StringVarP(&out, "output", "o", "", "HTML page `FILE` to write")
	_ = cmd.MarkFlagFilename("output", "html")
	return cmd
}

// writeReport writes the HTML page of the artifact at art to out and says
// so on w.
func writeReport(w io.Writer, art, out string) error {
	s, err := report.Summarize(art)
	if err != nil {
		return withHint(err, art)
	}
	var page bytes.Buffer
	if err := report.WriteHTML(&page, s); err != nil {
		return err
	}
	if err := atomicfile.WriteFile(out, page.Bytes(), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(w, "wrote %s (%s): %d tensors, %d ternary\n",
		out, report.FormatBytes(int64(page.Len())), s.Totals.Tensors, s.Totals.TernaryTensors)
	return nil
}
