package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/diff"
	"ternkit/internal/textsafe"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/report"
)

func newDiffCmd() *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "diff A B [--json]",
		Short: "Show what changed between two artifacts",
		Long: `diff compares artifact A (typically the previous release) with B: provenance
(tool, creation time, recipe, policy, source files and metadata), tensors
added, removed or reshaped, and for each common tensor its kind, codec,
scale, the fraction of trits that differ and its size in bytes, then a
total. It reads what the artifacts record and does not verify them (use
verify for that). Exit status 0 whether or not they differ.`,
		Example: `  ternkit diff scout-v1.tkart scout-v2.tkart
  ternkit diff scout-v1.tkart scout-v2.tkart --json`,
		Args: exactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			var arts [2]*pack.Artifact
			for i, path := range args {
				a, err := pack.Open(path)
				if err != nil {
					return err
				}
				defer a.Close()
				arts[i] = a
			}
			rep, err := diff.Compare(arts[0], arts[1])
			if err != nil {
				return err
			}
			rep.A, rep.B = args[0], args[1]
			if asJSON {
				enc := json.NewEncoder(cmd.OutOrStdout())
				enc.SetIndent("", "  ")
				return enc.Encode(rep)
			}
			printDiff(cmd.OutOrStdout(), rep)
			return nil
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print as JSON")
	return cmd
}

func printDiff(w io.Writer, r *diff.Report) {
	fmt.Fprintf(w, "diff %s -> %s\n", r.A, r.B)
	if len(r.Provenance) > 0 {
		fmt.Fprintln(w, "provenance:")
		for _, c := range r.Provenance {
			fmt.Fprintf(w, "  %s: %s -> %s\n", textsafe.Escape(c.Field), textsafe.Escape(c.A), textsafe.Escape(c.B))
		}
	}
	section := func(title string, n int) {
		if n > 0 {
			fmt.Fprintf(w, "%s (%d):\n", title, n)
		}
	}
	section("added", len(r.Added))
	for _, t := range r.Added {
		fmt.Fprintf(w, "  + %s %s %s %s, %d bytes\n", textsafe.Escape(t.Name), report.FormatShape(t.Shape), t.Kind, t.Codec, t.Bytes)
	}
	section("removed", len(r.Removed))
	for _, t := range r.Removed {
		fmt.Fprintf(w, "  - %s %s %s %s, %d bytes\n", textsafe.Escape(t.Name), report.FormatShape(t.Shape), t.Kind, t.Codec, t.Bytes)
	}
	section("reshaped", len(r.Reshaped))
	for _, t := range r.Reshaped {
		fmt.Fprintf(w, "  ~ %s %s -> %s\n", textsafe.Escape(t.Name), report.FormatShape(t.ShapeA), report.FormatShape(t.ShapeB))
	}
	section("changed", len(r.Changed))
	for _, c := range r.Changed {
		fmt.Fprintf(w, "  %s: %s\n", textsafe.Escape(c.Name), strings.Join(changeParts(c), "; "))
	}
	printCompanionChanges(w, r)
	t := r.Totals
	fmt.Fprintf(w, "total: %d -> %d tensors (%d added, %d removed, %d reshaped, %d changed, %d unchanged); artifact %d -> %d bytes (%+d)",
		t.TensorsA, t.TensorsB, t.Added, t.Removed, t.Reshaped, t.Changed, t.Unchanged, t.BytesA, t.BytesB, t.BytesB-t.BytesA)
	if t.TritsCompared > 0 {
		fmt.Fprintf(w, "; trits differ %.2f%% (%d of %d compared)", 100*t.TritsFraction, t.TritsDiffer, t.TritsCompared)
	}
	fmt.Fprintln(w)
	if r.Same() {
		fmt.Fprintln(w, "no differences")
	}
}

// changeParts describes each changed aspect of a tensor.
func changeParts(c diff.TensorChange) []string {
	var parts []string
	for _, aspect := range c.Changed {
		switch aspect {
		case diff.AspectKind:
			parts = append(parts, fmt.Sprintf("kind %s -> %s", c.KindA, c.KindB))
		case diff.AspectCodec:
			parts = append(parts, fmt.Sprintf("codec %s -> %s", c.CodecA, c.CodecB))
		case diff.AspectScale:
			parts = append(parts, fmt.Sprintf("scale %s -> %s", scaleString(c.KindA, c.ScaleA), scaleString(c.KindB, c.ScaleB)))
		case diff.AspectTrits:
			parts = append(parts, fmt.Sprintf("trits differ %.2f%% (%d of %d)", 100*c.TritsFraction, c.TritsDiffer, c.TritsCompared))
		case diff.AspectBytes:
			parts = append(parts, fmt.Sprintf("bytes %d -> %d (%+d)", c.BytesA, c.BytesB, c.BytesB-c.BytesA))
		default:
			parts = append(parts, aspect+" changed")
		}
	}
	return parts
}

func scaleString(kind string, s float32) string {
	if kind != manifest.KindTernary {
		return "-"
	}
	return fmt.Sprintf("%.6g", s)
}
