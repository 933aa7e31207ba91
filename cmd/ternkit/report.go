package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"

	"github.com/spf13/cobra"

	"ternkit/internal/atomicfile"
	"ternkit/internal/inputfile"
	"ternkit/report"
	"ternkit/verify"
)

func newReportCmd() *cobra.Command {
	var (
		out, against, verifyJSON, budgetFile string
		runVerify                            bool
		limits                               = map[string]*[]string{}
	)
	cmd := &cobra.Command{
		Use:   "report ARTIFACT -o OUT.html [--verify [--against SRC] [--key NAME.pub] [budget flags] | --verify-json FILE]",
		Short: "Write a self-contained HTML page describing an artifact",
		Long: `report reads an artifact's manifest and writes one HTML page to OUT: summary
cards (sizes, ratio, ternary weights, bits per weight, zero trits, weight
memory against F16, largest error, verification), a chart of bits per
weight and zero trits per layer, a per-layer summary of the relative error
(smallest, median, largest), a table of every tensor (kind and stored
dtype, codec, granularity, bits, zero fraction, error, cosine, bytes), the
recipe, the policy as applied, the provenance and the cautions. The page
loads nothing from anywhere (no script, no font, no network); open it in
any browser or attach it to a release review. It is written atomically.

Alone, report checks the manifest hash but not the sections. --verify runs
verify for the page (with --against, --key and the budget flags as verify
takes them) and shows its verdicts, the signature's included, and the
budget's max-rel-rmse limits on the error chart; --verify-json FILE shows
the verdicts of a saved 'ternkit verify --json'. A failed verification
still writes the page, then exits 1. The page describes the packing, not
task quality.`,
		Example: `  ternkit report model.tkart -o model.html
  ternkit report model.tkart -o model.html --verify --against model.safetensors --key release.pub --max-rel-rmse 0.6
  ternkit verify model.tkart --json > verify.json && ternkit report model.tkart -o model.html --verify-json verify.json`,
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
			budget, err := readBudget(budgetFile, limits)
			if err != nil {
				return err
			}
			sig, err := signatureFlags(cmd, args[0])
			if err != nil {
				return err
			}
			if verifyJSON != "" && (runVerify || against != "" || sig != nil || budget != nil) {
				return usagef("--verify-json shows a saved verify; it does not go with --verify, --against, --key or budget flags")
			}
			if !runVerify && (against != "" || sig != nil || budget != nil) {
				return usagef("--against, --key and budget flags go with --verify")
			}
			w := newWarnings(cmd)
			var page report.Page
			failed := false
			switch {
			case runVerify:
				opts := verify.Options{Budget: budget, Workers: runtime.NumCPU(), Signature: sig}
				if against != "" {
					src, err := openSource(against, w)
					if err != nil {
						return checkpointHint(err, against)
					}
					defer src.Close()
					opts.Source = src
				}
				rep, err := verify.Run(args[0], opts)
				if err != nil {
					return err
				}
				w.addAll(rep.Warnings)
				page.Verification = verification(rep, verifiedForPage)
				failed = !rep.OK()
				if budget != nil {
					for _, l := range budget.Limits {
						if l.Metric == verify.MaxRelRMSE {
							page.Budget = append(page.Budget, report.BudgetLine{Match: l.Match, Value: l.Value})
						}
					}
				}
			case verifyJSON != "":
				data, err := inputfile.ReadFile(verifyJSON)
				if err != nil {
					return err
				}
				var rep verify.Report
				if err := json.Unmarshal(data, &rep); err != nil || len(rep.Checks) == 0 {
					return usagef("--verify-json %s: not the output of ternkit verify --json (%v)", verifyJSON, err)
				}
				if filepath.Clean(rep.Artifact) != filepath.Clean(args[0]) {
					w.add("--verify-json %s checked %s, not %s", verifyJSON, rep.Artifact, args[0])
				}
				page.Verification = verification(&rep, "verify JSON "+verifyJSON)
				failed = !rep.OK()
			}
			if err := w.check(); err != nil {
				return err
			}
			if err := writeReport(textOut(cmd), args[0], out, page); err != nil {
				return err
			}
			if failed {
				fmt.Fprintf(cmd.ErrOrStderr(), "report: the verification shown on %s FAILED\n", out)
				return errVerifyFailed
			}
			return nil
		},
	}
	cmd.Flags().StringVarP(&out, "output", "o", "", "HTML page `FILE` to write")
	_ = cmd.MarkFlagFilename("output", "html")
	cmd.Flags().BoolVar(&runVerify, "verify", false, "run verify for the page and show its verdicts")
	cmd.Flags().StringVar(&against, "against", "", "with --verify: source checkpoint `SRC` to verify against")
	_ = cmd.MarkFlagFilename("against", "safetensors")
	cmd.Flags().StringVar(&verifyJSON, "verify-json", "", "show the verdicts of a saved 'ternkit verify --json' `FILE`")
	_ = cmd.MarkFlagFilename("verify-json", "json")
	registerKeyFlag(cmd)
	registerBudgetFlags(cmd, &budgetFile, limits)
	return cmd
}

// verifiedForPage says where a verification run by report or demo comes
// from.
const verifiedForPage = "ternkit verify, run for this page"

// verification is a verify report as the page shows it.
func verification(rep *verify.Report, from string) *report.Verification {
	v := &report.Verification{From: from, Source: rep.Source, OK: rep.OK(), Passed: rep.Passed, Failed: rep.Failed, Warnings: rep.Warnings}
	for _, c := range rep.Checks {
		switch {
		case c.Name == verify.CheckSignature:
			v.Signature, v.SignatureOK = c.Detail, c.OK
		case c.Name == verify.CheckBound && c.OK:
			v.Bound = c.Detail
		}
		if !c.OK && len(v.Failures) < 10 {
			what := c.Name
			if c.Tensor != "" {
				what += " " + c.Tensor
			}
			v.Failures = append(v.Failures, what+": "+c.Detail)
		}
	}
	return v
}

// writeReport writes the HTML page of the artifact at art to out and says
// so on w.
func writeReport(w io.Writer, art, out string, p report.Page) error {
	s, err := report.Summarize(art)
	if err != nil {
		return artifactError(err, art)
	}
	var page bytes.Buffer
	if err := report.WritePage(&page, s, p); err != nil {
		return err
	}
	if err := atomicfile.WriteFile(out, page.Bytes(), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(w, "wrote %s (%s): %d tensors, %d ternary\n",
		out, report.FormatBytes(int64(page.Len())), s.Totals.Tensors, s.Totals.TernaryTensors)
	return nil
}
