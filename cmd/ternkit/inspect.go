package main

import (
	"cmp"

	"fmt"
	"io"
	"slices"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/internal/textsafe"
	"ternkit/manifest"
	"ternkit/report"
)

// inspectSortKeys are the values of inspect --sort, each with its order:
// text columns ascending, numeric columns largest first; ties keep the
// artifact's order.
var inspectSortKeys = []struct {
	key  string
	less func(a, b *report.Tensor) int
}{
	{"file", func(a, b *report.Tensor) int { return 0 }},
	{"name", func(a, b *report.Tensor) int { return strings.Compare(a.Name, b.Name) }},
	{"kind", func(a, b *report.Tensor) int { return strings.Compare(a.Kind, b.Kind) }},
	{"codec", func(a, b *report.Tensor) int { return strings.Compare(a.Codec, b.Codec) }},
	{"bits", func(a, b *report.Tensor) int { return cmp.Compare(b.BitsPerWeight, a.BitsPerWeight) }},
	{"zero", func(a, b *report.Tensor) int { return cmp.Compare(b.ZeroFraction, a.ZeroFraction) }},
	{"error", func(a, b *report.Tensor) int { return cmp.Compare(b.RelRMSE, a.RelRMSE) }},
	{"bytes", func(a, b *report.Tensor) int { return cmp.Compare(b.Bytes, a.Bytes) }},
}

func sortKeyNames() []string {
	names := make([]string, len(inspectSortKeys))
	for i, k := range inspectSortKeys {
		names[i] = k.key
	}
	return names
}

// inspectView is how inspect shows the tensors: the order and the name
// patterns. Its flags are checked before any I/O.
type inspectView struct {
	sort     string
	patterns []string
}

func (v *inspectView) register(cmd *cobra.Command) {
	cmd.Flags().StringVar(&v.sort, "sort", "file", "order the rows by `KEY`: "+strings.Join(sortKeyNames(), ", ")+
		" (text columns A to Z, numeric columns largest first)")
	cmd.Flags().StringArrayVar(&v.patterns, "tensor", nil, "show only tensors whose name matches `GLOB` (* ? [...]); repeat to show several")
	_ = cmd.RegisterFlagCompletionFunc("sort", fixedCompletions(sortKeyNames()...))
}

// check validates the flags and returns the sort order.
func (v *inspectView) check() (func(a, b *report.Tensor) int, error) {
	for _, p := range v.patterns {
		if err := convert.CheckGlob(p); err != nil {
			return nil, usagef("--tensor %q is not a valid glob: %v", p, err)
		}
	}
	for _, k := range inspectSortKeys {
		if k.key == v.sort {
			return k.less, nil
		}
	}
	return nil, usagef("--sort %q is not a column%s (valid: %s)", v.sort, didYouMean(v.sort, sortKeyNames()), strings.Join(sortKeyNames(), ", "))
}

// apply filters and orders the summary's tensors; it is an input error
// when the patterns match no tensor, and a warning when one of several
// does not.
func (v *inspectView) apply(s *report.Summary, order func(a, b *report.Tensor) int, w *warnings) error {
	all, example := len(s.Tensors), exampleName(s)
	for _, p := range v.patterns {
		if len(v.patterns) > 1 && !slices.ContainsFunc(s.Tensors, func(t report.Tensor) bool { ok, _ := convert.MatchGlob(p, t.Name); return ok }) {
			w.add("--tensor %q matches none of the %d tensors in %s", p, all, s.Artifact)
		}
	}
	if len(v.patterns) > 0 {
		s.Tensors = slices.DeleteFunc(s.Tensors, func(t report.Tensor) bool {
			for _, p := range v.patterns {
				if ok, _ := convert.MatchGlob(p, t.Name); ok {
					return false
				}
			}
			return true
		})
		if len(s.Tensors) == 0 {
			return usagef("--tensor %s matches none of the %d tensors in %s (names look like %q; use inspect without --tensor to list them)",
				quoteAll(v.patterns), all, s.Artifact, example)
		}
	}
	slices.SortStableFunc(s.Tensors, func(a, b report.Tensor) int { return order(&a, &b) })
	return nil
}

func quoteAll(ss []string) string {
	q := make([]string, len(ss))
	for i, s := range ss {
		q[i] = fmt.Sprintf("%q", s)
	}
	return strings.Join(q, ", ")
}

// exampleName is a ternary tensor's name, else the first one, to show what
// names look like.
func exampleName(s *report.Summary) string {
	for _, t := range s.Tensors {
		if t.Ternary() {
			return t.Name
		}
	}
	if len(s.Tensors) > 0 {
		return s.Tensors[0].Name
	}
	return ""
}

func newInspectCmd() *cobra.Command {
	var (
		asJSON bool
		view   inspectView
	)
	cmd := &cobra.Command{
		Use:   "inspect ARTIFACT",
		Short: "Show what an artifact holds",
		Long: `inspect reads an artifact's manifest and prints one row per tensor (shape,
kind, codec, granularity, bits per weight, zero fraction, relative error,
cosine, bytes) and the
totals: source and artifact size, ratio, ternary parameters, bits per
ternary weight and the weight memory a runtime holds (ternary tensors in
their decodable codec with their scales, int8 and kept tensors as stored)
against every float tensor at F16. It checks the manifest hash but not the sections: use
verify for that. --tensor and --sort change the rows, never the totals.`,
		Example: `  ternkit inspect model.tkart
  ternkit inspect model.tkart --sort error
  ternkit inspect model.tkart --tensor 'model.layers.0.*' --tensor '*.mlp.*'
  ternkit inspect model.tkart --json`,
		Args:              exactArgs(1),
		ValidArgsFunction: artifactCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			order, err := view.check()
			if err != nil {
				return err
			}
			w := newWarnings(cmd)
			s, err := report.Summarize(args[0])
			if err != nil {
				return artifactError(err, args[0])
			}
			all := len(s.Tensors)
			if err := view.apply(s, order, w); err != nil {
				return err
			}
			if err := w.check(); err != nil {
				return err
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), inspectJSON{s, w.JSON()})
			}
			printInspect(textOut(cmd), s, all)
			return nil
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print as JSON (keys in README, \"JSON output\")")
	view.register(cmd)
	return cmd
}

// inspectJSON is what inspect --json prints: the summary and the run's
// warnings.
type inspectJSON struct {
	*report.Summary
	Warnings []string `json:"warnings"`
}

// printInspect writes the table and the totals; all is the artifact's
// tensor count before filtering. Numeric columns are right-aligned.
func printInspect(w io.Writer, s *report.Summary, all int) {
	rows := [][]string{{"TENSOR", "SHAPE", "KIND", "CODEC", "GRAN", "BITS/W", "ZERO%", "REL.ERR", "COSINE", "BYTES"}}
	for _, t := range s.Tensors {
		kind, gran, zero, rel, cos := t.Kind, "-", "-", "-", "-"
		if t.Kind == manifest.KindKept && t.DType != t.SourceDType {
			kind = "kept:" + strings.ToLower(t.DType)
		}
		if t.Granularity != "" {
			gran = t.Granularity
		}
		if t.Kind != manifest.KindKept {
			zero = fmt.Sprintf("%.1f", 100*t.ZeroFraction)
		}
		switch {
		case t.Exact:
			rel, cos = "exact", "exact"
		case t.Lossy():
			rel, cos = fmt.Sprintf("%.4f", t.RelRMSE), fmt.Sprintf("%.4f", t.Cosine)
		}
		rows = append(rows, []string{textsafe.Escape(t.Name), report.FormatShape(t.Shape), kind, t.Codec, gran,
			fmt.Sprintf("%.3f", t.BitsPerWeight), zero, rel, cos, fmt.Sprint(t.Bytes)})
	}
	const firstNumeric = 5
	width := make([]int, len(rows[0]))
	for _, r := range rows {
		for i, c := range r {
			width[i] = max(width[i], len(c))
		}
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	for _, r := range rows {
		for i := firstNumeric; i < len(r); i++ {
			r[i] = fmt.Sprintf("%*s", width[i], r[i])
		}
		fmt.Fprintln(tw, strings.Join(r, "\t"))
	}
	tw.Flush()
	tot := s.Totals
	fmt.Fprintln(w)
	if len(s.Tensors) < all {
		fmt.Fprintf(w, "showing %d of %d tensors; totals are for the whole artifact\n", len(s.Tensors), all)
	}
	fmt.Fprintf(w, "tensors          %d (%d ternary, %d int8, %d kept)\n", tot.Tensors, tot.TernaryTensors, tot.Int8Tensors, tot.KeptTensors)
	fmt.Fprintf(w, "size             source %s, artifact %s: %s\n",
		report.FormatBytes(tot.SourceBytes), report.FormatBytes(s.Bytes), report.FormatSizeChange(s.Ratio))
	fmt.Fprintf(w, "ternary weights  %s at %.3f bits/weight (scales included), %.1f%% zero\n",
		report.FormatCount(tot.TernaryParams), tot.BitsPerTernaryWeight, 100*s.ZeroFraction)
	fmt.Fprintf(w, "weight memory    %s as a runtime holds it (ternary in place with scales, int8 and kept as stored) vs %s with every float tensor at F16\n",
		report.FormatBytes(s.WeightMemory.TernaryForm), report.FormatBytes(s.WeightMemory.F16Form))
	sum := s.Recipe.Sum
	if sum == "" {
		sum = convert.SumSequential
	}
	fmt.Fprintf(w, "recipe           %s/%s eps=%g ties %s, sum %s\n", s.Recipe.Method, s.Recipe.ScaleRule, s.Recipe.Epsilon, s.Recipe.Tie, sum)
	if len(s.Policy) > 0 {
		fmt.Fprintf(w, "policy           %s\n", textsafe.Escape(strings.Join(s.Policy, "; ")))
	}
	if s.Created != "" {
		fmt.Fprintf(w, "created          %s by %s\n", s.Created, textsafe.Escape(s.Tool))
	}
	printCompanions(w, s)
	fmt.Fprintf(w, "file BLAKE3      %s\n", s.FileBLAKE3)
}
