package main

import (
	"errors"
	"fmt"
	"io"
	"runtime"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/internal/inputfile"
	"ternkit/internal/textsafe"
	"ternkit/pack"
	"ternkit/verify"
)

func newVerifyCmd() *cobra.Command {
	var (
		against    string
		asJSON     bool
		budgetFile string
		workers    int
		limits     = map[string]*[]string{}
	)
	cmd := &cobra.Command{
		Use:   "verify ARTIFACT [--against SRC]",
		Short: "Check an artifact's hashes and payloads, and optionally its source",
		Long: `verify checks the artifact's structure, the manifest hash, every section
hash, the zero padding, and decodes every ternary tensor against its trit
counts. With --against SRC it also re-reads the source checkpoint,
redoes each tensor's recorded action with the recorded recipe, and requires
the same trits, codes, scales and statistics, the same bytes for kept
tensors, and the per-element error bound. A budget (--budget FILE, or the
--max-rel-rmse, --min-cosine, --max-clipped and --max-abs-err flags) fails
every tensor whose statistics go beyond a limit, naming tensor, metric,
value and limit.

A budget limit that matches no tensor, and any other warning, is printed
on stderr and listed under "warnings" in --json; with --strict (or
TERNKIT_STRICT=1) a warning makes verify exit 2 after printing its report.

Exit status: 0 every check passed, 1 a check failed, 2 usage or unreadable
input (a file that is not an artifact at all, too).
A passing verify proves bytes and bounds, not task quality.`,
		Example: `  ternkit verify model.tkart
  ternkit verify model.tkart --against model.safetensors --json
  ternkit verify model.tkart --max-rel-rmse 0.6 --min-cosine 'model.layers.*=0.85'
  ternkit verify model.tkart --budget release-budget.toml`,
		Args:              exactArgs(1),
		ValidArgsFunction: artifactCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			w := newWarnings(cmd)
			budget, err := readBudget(budgetFile, limits)
			if err != nil {
				return err
			}
			sig, err := signatureFlags(cmd, args[0])
			if err != nil {
				return err
			}
			if workers < 1 {
				return usagef("--workers %d: want 1 or more", workers)
			}
			bar := newProgressBar(cmd, "verify")
			opts := verify.Options{Progress: bar.callback(), Budget: budget, Workers: workers, Signature: sig, Digests: asJSON}
			if against != "" {
				src, err := openSource(against, w)
				if err != nil {
					return checkpointHint(err, against)
				}
				defer src.Close()
				opts.Source = src
			}
			rep, err := verify.Run(args[0], opts)
			bar.finish()
			if err != nil {
				return err
			}
			if err := notArtifactOf(rep, args[0]); err != nil {
				return err
			}
			w.addAll(rep.Warnings)
			out := textOut(cmd)
			if quiet(cmd) && !rep.OK() && !asJSON {
				out = cmd.ErrOrStderr()
			}
			if err := printReport(out, rep, asJSON, w); err != nil {
				return err
			}
			if !rep.OK() {
				return errVerifyFailed
			}
			return w.check()
		},
	}
	registerKeyFlag(cmd)
	cmd.Flags().IntVar(&workers, "workers", runtime.NumCPU(), "sections and source tensors checked in parallel")
	cmd.Flags().StringVar(&against, "against", "", "source checkpoint `SRC` to re-quantize and compare (file, sharded set index, or directory)")
	_ = cmd.MarkFlagFilename("against", "safetensors")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print every check as JSON (keys in README, \"JSON output\")")
	registerBudgetFlags(cmd, &budgetFile, limits)
	return cmd
}

// registerBudgetFlags adds --budget FILE and one flag per metric.
func registerBudgetFlags(cmd *cobra.Command, budgetFile *string, limits map[string]*[]string) {
	cmd.Flags().StringVar(budgetFile, "budget", "", "budget `FILE` (TOML [[budget]] tables: match and limits)")
	_ = cmd.MarkFlagFilename("budget", "toml")
	for _, metric := range verify.Metrics {
		v := new([]string)
		limits[metric] = v
		flag := strings.ReplaceAll(metric, "_", "-")
		cmd.Flags().StringArrayVar(v, flag, nil, metricHelp[metric]+" of any tensor with statistics: VALUE for all, or GLOB=VALUE (repeatable)")
	}
}

var metricHelp = map[string]string{
	verify.MaxRelRMSE:  "largest relative RMS error",
	verify.MinCosine:   "smallest cosine similarity",
	verify.MaxClipped:  "largest clipped fraction",
	verify.MaxAbsError: "largest absolute error",
}

// readBudget assembles the budget file and the limit flags; nil when none.
func readBudget(file string, limits map[string]*[]string) (*verify.Budget, error) {
	b := &verify.Budget{}
	if file != "" {
		data, err := inputfile.ReadFile(file)
		if err != nil {
			return nil, err
		}
		if b, err = verify.ParseBudget(file, data); err != nil {
			return nil, err
		}
	}
	for _, metric := range verify.Metrics {
		for _, s := range *limits[metric] {
			l, err := verify.ParseLimit(metric, s)
			if err != nil {
				return nil, usageError{err}
			}
			b.Limits = append(b.Limits, l)
		}
	}
	if len(b.Limits) == 0 {
		return nil, nil
	}
	return b, nil
}

// verifyJSON is what verify --json prints: the report, its verdict and
// every warning of the run (the source's and the budget's).
type verifyJSON struct {
	*verify.Report
	OK       bool     `json:"ok"`
	Warnings []string `json:"warnings"`
}

// printReport prints the report; its warnings were printed on stderr as
// they were added to w.
func printReport(w io.Writer, rep *verify.Report, asJSON bool, warn *warnings) error {
	if asJSON {
		return writeJSON(w, verifyJSON{rep, rep.OK(), warn.JSON()})
	}
	// the verdict first, then what it rests on
	what := rep.Artifact
	if rep.Source != "" {
		what += " against " + rep.Source
	}
	if rep.OK() {
		fmt.Fprintf(w, "verify: ok: %d checks passed: %s\n", rep.Passed, what)
	} else {
		fmt.Fprintf(w, "verify: FAILED: %d of %d checks failed: %s\n", rep.Failed, rep.Failed+rep.Passed, what)
	}
	// a valid signature is news only when everything else holds too
	if c, ok := rep.Find(verify.CheckSignature, ""); ok && c.OK && rep.OK() {
		fmt.Fprintf(w, "signature: valid, %s\n", c.Detail)
	}
	for _, note := range rep.Notes {
		fmt.Fprintf(w, "note: %s\n", note)
	}
	if c, ok := rep.Find(verify.CheckBound, ""); ok && c.OK {
		fmt.Fprintf(w, "bound: %s\n", c.Detail)
	}
	for _, c := range rep.Failures() {
		if c.Tensor != "" {
			fmt.Fprintf(w, "FAIL %s %q: %s\n", c.Name, c.Tensor, textsafe.Escape(c.Detail))
		} else {
			fmt.Fprintf(w, "FAIL %s: %s\n", c.Name, textsafe.Escape(c.Detail))
		}
	}
	if n := budgetNotRecomputed(rep); n > 0 {
		fmt.Fprintf(w, "budget: %d verdicts on %s\n", n, verify.NotRecomputed)
	}
	return nil
}

// budgetNotRecomputed counts the budget verdicts given on the manifest's
// own statistics.
func budgetNotRecomputed(rep *verify.Report) int {
	n := 0
	for _, c := range rep.Checks {
		if c.Name == verify.CheckBudget && c.Recomputed != nil && !*c.Recomputed {
			n++
		}
	}
	return n
}

// notArtifactOf is the input error (exit 2) for a report whose structure
// check failed because path is not an artifact at all, as in every
// command; nil for an artifact, damaged or not.
func notArtifactOf(rep *verify.Report, path string) error {
	if c, ok := rep.Find(verify.CheckStructure, ""); ok && !c.OK {
		a, err := pack.Open(path)
		if err == nil {
			a.Close()
		} else if errors.Is(err, pack.ErrNotArtifact) || notArtifact(path) {
			return notArtifactError(err, path)
		}
	}
	return nil
}
