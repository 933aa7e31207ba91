package main

import (
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/diff"
	"ternkit/internal/textsafe"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/report"
)

// diffJSON is what diff --json prints (keys in README, "JSON output").
type diffJSON struct {
	*diff.Report
	FailOn   []string `json:"fail_on"`
	Failures []string `json:"failures"`
	OK       bool     `json:"ok"`
	Warnings []string `json:"warnings"`
}

func newDiffCmd() *cobra.Command {
	var (
		asJSON bool
		trits  bool
		failOn []string
	)
	cmd := &cobra.Command{
		Use:   "diff A B [--trits] [--fail-on COND]... [--json]",
		Short: "Show what changed between two artifacts; fail a pipeline on chosen changes",
		Long: `diff compares artifact A (typically the previous release) with B: provenance
(tool, creation time, recipe, policy, source files and metadata), tensors
added, removed or reshaped, and for each common tensor its kind, codec,
granularity, scales (with the largest relative drift), statistics against
the source (relative RMSE, cosine, zero fraction), size, and whether its
section bytes differ, then a total.

Sections are compared by the BLAKE3 of the bytes read from both files, not
by the hashes the manifests record; a section that does not match its own
manifest's record is reported as a mismatch (the artifact is corrupt: run
verify). Trits are decoded and counted only with --trits (or --fail-on
trits), where section bytes or codecs differ. The output says which.

--fail-on COND (repeatable) makes diff a gate: exit 1 when a condition
holds. Conditions: trits (any trit differs), sections (any common tensor's
bytes differ), added, removed, reshaped, kind, scale=R (a scale drifted by
more than R relative, or scales became incomparable), rel_rmse=D, cosine=D,
zero_fraction=D (a statistic moved by more than D), any (any difference).
A section mismatch also exits 1. Otherwise exit 0, whether or not they differ.`,
		Example: `  ternkit diff scout-v1.tkart scout-v2.tkart
  ternkit diff scout-v1.tkart scout-v2.tkart --trits --json
  ternkit diff scout-v1.tkart scout-v2.tkart --fail-on trits --fail-on removed --fail-on scale=0.01
  ternkit diff scout-v1.tkart scout-v2.tkart --fail-on rel_rmse=0.005 --fail-on cosine=0.001 -q   # a gate`,
		Args: exactArgs(2),
		ValidArgsFunction: func(_ *cobra.Command, args []string, _ string) ([]cobra.Completion, cobra.ShellCompDirective) {
			if len(args) >= 2 {
				return nil, cobra.ShellCompDirectiveNoFileComp
			}
			return []cobra.Completion{strings.TrimPrefix(pack.Extension, ".")}, cobra.ShellCompDirectiveFilterFileExt
		},
		RunE: func(cmd *cobra.Command, args []string) error {
			var conds []diff.Condition
			for _, s := range failOn {
				c, err := diff.ParseCondition(s)
				if err != nil {
					name, _, _ := strings.Cut(s, "=")
					return usagef("--fail-on: %w%s", err, didYouMean(name, conditionNames()))
				}
				conds = append(conds, c)
			}
			w := newWarnings(cmd)
			var arts [2]*pack.Artifact
			for i, path := range args {
				a, err := pack.Open(path)
				if err != nil {
					return artifactError(err, path)
				}
				defer a.Close()
				arts[i] = a
			}
			rep, err := diff.Compare(arts[0], arts[1], diff.Options{Trits: trits || diff.NeedsTrits(conds)})
			if err != nil {
				return asCorrupt(err)
			}
			rep.A, rep.B = args[0], args[1]
			failures := rep.Failures(conds)
			for _, m := range rep.Mismatches {
				failures = append(failures, fmt.Sprintf("mismatch: %s: tensor %q %s does not match the BLAKE3 its manifest records", artName(rep, m.Artifact), m.Tensor, m.Section))
			}
			if asJSON {
				names := make([]string, len(conds))
				for i, c := range conds {
					names[i] = c.String()
				}
				if failures == nil {
					failures = []string{}
				}
				if err := writeJSON(cmd.OutOrStdout(), diffJSON{rep, names, failures, len(failures) == 0, w.JSON()}); err != nil {
					return err
				}
			} else {
				out := textOut(cmd)
				printDiff(out, rep)
				if quiet(cmd) {
					out = cmd.ErrOrStderr() // failures only
				}
				for _, f := range failures {
					fmt.Fprintf(out, "FAIL %s\n", f)
				}
				if len(conds) > 0 && len(failures) == 0 && !quiet(cmd) {
					fmt.Fprintf(out, "diff: no --fail-on condition holds (%d checked)\n", len(conds))
				}
			}
			if len(failures) > 0 {
				return errVerifyFailed
			}
			return w.check()
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print as JSON (keys in README, \"JSON output\")")
	cmd.Flags().BoolVar(&trits, "trits", false, "decode the trits of ternary tensors whose sections differ and count the trits that differ")
	cmd.Flags().StringArrayVar(&failOn, "fail-on", nil, "exit 1 when `COND` holds (repeatable): "+strings.Join(diff.ConditionNames, ", "))
	_ = cmd.RegisterFlagCompletionFunc("fail-on", fixedCompletions(conditionNames()...))
	return cmd
}

func conditionNames() []string {
	out := make([]string, len(diff.ConditionNames))
	for i, n := range diff.ConditionNames {
		out[i] = strings.TrimSuffix(strings.TrimSuffix(n, "=R"), "=D")
	}
	return out
}

func artName(r *diff.Report, which string) string {
	if which == "a" {
		return r.A
	}
	return r.B
}

func printDiff(w io.Writer, r *diff.Report) {
	fmt.Fprintf(w, "diff %s -> %s\n", r.A, r.B)
	fmt.Fprintf(w, "compared: %s\n", r.Compared.Summary)
	if len(r.Provenance) > 0 {
		fmt.Fprintln(w, "provenance:")
		for _, c := range r.Provenance {
			if c.Field == "policy" {
				fmt.Fprintln(w, "  policy: the rules differ")
				for _, rule := range c.RulesRemoved {
					fmt.Fprintf(w, "    - %s\n", textsafe.Escape(rule))
				}
				for _, rule := range c.RulesAdded {
					fmt.Fprintf(w, "    + %s\n", textsafe.Escape(rule))
				}
				if len(c.RulesAdded)+len(c.RulesRemoved) == 0 {
					fmt.Fprintln(w, "    (the same rules in another order; the first that matches decides)")
				}
				fmt.Fprintf(w, "    was: %s\n    now: %s\n", textsafe.Escape(c.A), textsafe.Escape(c.B))
				continue
			}
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
		fmt.Fprintf(w, "  %s: %s\n", textsafe.Escape(c.Name), strings.Join(changeParts(c, r.Compared.Trits, r.Compared.Source == diff.SourceSpan), "; "))
	}
	section("MISMATCH: sections that do not match their own manifest's BLAKE3 (corrupt: run ternkit verify)", len(r.Mismatches))
	for _, m := range r.Mismatches {
		fmt.Fprintf(w, "  %s: %s %s: read %s, manifest records %s\n", artName(r, m.Artifact), textsafe.Escape(m.Tensor), m.Section, m.Actual, m.Recorded)
	}
	printCompanionChanges(w, r)
	t := r.Totals
	fmt.Fprintf(w, "total: %d -> %d tensors (%d added, %d removed, %d reshaped, %d changed, %d unchanged); artifact %d -> %d bytes (%+d); section bytes differ in %d of %d common tensors",
		t.TensorsA, t.TensorsB, t.Added, t.Removed, t.Reshaped, t.Changed, t.Unchanged, t.BytesA, t.BytesB, t.BytesB-t.BytesA, t.SectionsDiffer, t.Changed+t.Unchanged)
	if r.Compared.Trits {
		fmt.Fprintf(w, "; trits differ %s (%d of %d compared)", percent(t.TritsFraction), t.TritsDiffer, t.TritsCompared)
	} else {
		fmt.Fprint(w, "; trits not decoded (--trits counts them)")
	}
	fmt.Fprintln(w)
	if r.Same() {
		fmt.Fprintln(w, "no differences")
	}
}

// percent writes a fraction as a percentage, never rounding a nonzero
// fraction to "0.00%".
func percent(f float64) string {
	switch {
	case f == 0:
		return "0%"
	case f < 0.0001:
		return "<0.01%"
	}
	return fmt.Sprintf("%.2f%%", 100*f)
}

// changeParts describes each changed aspect of a tensor in words.
func changeParts(c diff.TensorChange, tritsDecoded, sourceSpan bool) []string {
	var parts []string
	for _, aspect := range c.Changed {
		switch aspect {
		case diff.AspectKind:
			parts = append(parts, fmt.Sprintf("kind %s -> %s", c.KindA, c.KindB))
		case diff.AspectCodec:
			parts = append(parts, fmt.Sprintf("codec %s -> %s", c.CodecA, c.CodecB))
		case diff.AspectDType:
			parts = append(parts, "source dtype changed")
		case diff.AspectStored:
			parts = append(parts, fmt.Sprintf("stored dtype %s -> %s", orDash(c.DTypeA), orDash(c.DTypeB)))
		case diff.AspectGran:
			parts = append(parts, fmt.Sprintf("granularity %s -> %s", orDash(c.GranA), orDash(c.GranB)))
		case diff.AspectScale:
			if s := scaleChange(c); s != "" {
				parts = append(parts, s)
			}
		case diff.AspectTrits:
			parts = append(parts, fmt.Sprintf("trits differ %s (%d of %d)", percent(c.TritsFraction), c.TritsDiffer, c.TritsCompared))
		case diff.AspectStats:
			parts = append(parts, statsChange(c))
		case diff.AspectBytes:
			parts = append(parts, fmt.Sprintf("bytes %d -> %d (%+d)", c.BytesA, c.BytesB, c.BytesB-c.BytesA))
		case diff.AspectSource:
			if sourceSpan {
				parts = append(parts, "source bytes or place differ")
			} else {
				parts = append(parts, "source tensor changed")
			}
		case diff.AspectData:
			if c.KindA == manifest.KindTernary && c.KindB == manifest.KindTernary && !tritsDecoded {
				parts = append(parts, "section bytes differ (trits not decoded: --trits counts them)")
			} else {
				parts = append(parts, "section bytes differ")
			}
		default:
			parts = append(parts, aspect+" changed")
		}
	}
	return parts
}

func orDash(s string) string {
	if s == "" {
		return "none"
	}
	return s
}

// scaleChange writes a change of scales: the values for one scale per
// tensor, the largest drift for a scales section, or nothing when the kind
// or granularity changed (those parts say it).
func scaleChange(c diff.TensorChange) string {
	if c.ScaleDrift == nil {
		return ""
	}
	if *c.ScaleDrift >= math.MaxFloat64 {
		return fmt.Sprintf("%s scales changed (a scale was 0 or not a number: unbounded drift)", c.KindA)
	}
	if c.ScaleA != 0 && c.ScaleB != 0 {
		return fmt.Sprintf("scale %.6g -> %.6g (%s drift)", c.ScaleA, c.ScaleB, percent(*c.ScaleDrift))
	}
	return fmt.Sprintf("%s scales changed (largest drift %s)", c.KindA, percent(*c.ScaleDrift))
}

// statsChange writes the statistics that moved.
func statsChange(c diff.TensorChange) string {
	var parts []string
	if *c.RelRMSEA != *c.RelRMSEB {
		parts = append(parts, fmt.Sprintf("rel_rmse %.4f -> %.4f (%+.4f)", *c.RelRMSEA, *c.RelRMSEB, *c.RelRMSEB-*c.RelRMSEA))
	}
	if *c.CosineA != *c.CosineB {
		parts = append(parts, fmt.Sprintf("cosine %.4f -> %.4f (%+.4f)", *c.CosineA, *c.CosineB, *c.CosineB-*c.CosineA))
	}
	if *c.ZeroA != *c.ZeroB {
		parts = append(parts, fmt.Sprintf("zero %.1f%% -> %.1f%%", 100**c.ZeroA, 100**c.ZeroB))
	}
	if len(parts) == 0 {
		return "statistics changed (clipped fraction or largest error)"
	}
	return strings.Join(parts, ", ")
}
