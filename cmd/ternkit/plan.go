package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/report"
)

// A dry run of pack: `pack SRC --plan` reads the source's headers, decides
// each tensor's action with the policy, and projects the section bytes it
// would take, without reading a weight or writing a byte.

// planTensor is one tensor of a plan (keys in README, "JSON output").
type planTensor struct {
	Name        string  `json:"name"`
	Shape       []int64 `json:"shape"`
	SourceDType string  `json:"source_dtype"`
	Action      string  `json:"action"`                // the action taken, e.g. "ternary:row", "keep:f16"
	Rule        int     `json:"rule"`                  // 1-based index of the deciding rule; 0 when no rule applies (kept)
	Kind        string  `json:"kind"`                  // ternary, int8 or kept
	Granularity string  `json:"granularity,omitempty"` // ternary and int8
	Codec       string  `json:"codec"`                 // the codec it would be written with (auto: base3 or entropy)
	DType       string  `json:"dtype,omitempty"`       // stored dtype of a kept tensor
	SourceBytes int64   `json:"source_bytes"`
	Bytes       int64   `json:"bytes"` // projected payload and scales bytes
}

// planTotals sums a plan.
type planTotals struct {
	Tensors        int     `json:"tensors"`
	TernaryTensors int     `json:"ternary_tensors"`
	Int8Tensors    int     `json:"int8_tensors"`
	KeptTensors    int     `json:"kept_tensors"`
	TernaryParams  int64   `json:"ternary_params"`
	SourceBytes    int64   `json:"source_bytes"` // tensor bytes of the source
	Bytes          int64   `json:"bytes"`        // projected section bytes (manifest and alignment not included)
	BitsPerTernary float64 `json:"bits_per_ternary_weight"`
}

// packPlan is what pack --plan --json prints.
type packPlan struct {
	Source   string       `json:"source"`
	Codec    string       `json:"codec"`
	Policy   []string     `json:"policy"`
	Tensors  []planTensor `json:"tensors"`
	Totals   planTotals   `json:"totals"`
	Note     string       `json:"note"`
	Warnings []string     `json:"warnings"`
}

const planNote = "projected section bytes: exact for base3, bits2, int8 and kept tensors; " +
	"auto and entropy trits are shown at their base3 size (auto stores base3 unless an entropy frame is smaller, so it is at most this; an entropy frame is usually smaller)"

// makePlan decides every tensor of s with p and projects its bytes.
func makePlan(s *convert.Source, p *convert.Policy, codec pack.Codec) (*packPlan, error) {
	plan := &packPlan{Codec: string(codec), Policy: p.Describe(), Tensors: []planTensor{}, Note: planNote}
	tot := &plan.Totals
	var ternaryBytes int64
	for _, t := range s.Tensors {
		a, rule, err := p.Decide(t)
		if err != nil {
			return nil, err
		}
		n := t.NumElements()
		pt := planTensor{Name: t.Name, Shape: t.Shape, SourceDType: t.DType, Action: a.String(), Rule: rule + 1, SourceBytes: t.Length}
		switch a.Kind {
		case convert.ActTernary:
			pt.Kind, pt.Granularity, pt.Codec = manifest.KindTernary, a.Granularity.String(), string(codec)
			payloadCodec := codec
			if codec == pack.Auto || codec == pack.Entropy {
				payloadCodec = pack.Base3
			}
			pt.Bytes = int64(payloadCodec.EncodedLen(int(n)))
			if a.Granularity.Kind != convert.GranTensor {
				pt.Bytes += 4 * int64(a.Granularity.NumScales(int(n), convert.Columns(t.Shape)))
			}
			tot.TernaryTensors++
			tot.TernaryParams += n
			ternaryBytes += pt.Bytes
		case convert.ActInt8:
			pt.Kind, pt.Granularity, pt.Codec = manifest.KindInt8, "row", "raw"
			rows := int64(0)
			if cols := int64(convert.Columns(t.Shape)); cols > 0 {
				rows = n / cols
			}
			pt.Bytes = n + 4*rows
			tot.Int8Tensors++
		default:
			pt.Kind, pt.Codec = manifest.KindKept, "raw"
			pt.DType = a.KeptDType(t.DType)
			pt.Bytes = t.Length
			if pt.DType != t.DType {
				size, _ := convert.DTypeSize(pt.DType)
				pt.Bytes = n * int64(size)
			}
			tot.KeptTensors++
		}
		tot.Tensors++
		tot.SourceBytes += t.Length
		tot.Bytes += pt.Bytes
		plan.Tensors = append(plan.Tensors, pt)
	}
	if tot.TernaryParams > 0 {
		tot.BitsPerTernary = 8 * float64(ternaryBytes) / float64(tot.TernaryParams)
	}
	return plan, nil
}

// runPlan is pack SRC --plan.
func runPlan(cmd *cobra.Command, src string, rf *recipeFlags, asJSON bool) error {
	w := newWarnings(cmd)
	opts, err := rf.options(w)
	if err != nil {
		return err
	}
	s, err := openSource(src, w)
	if err != nil {
		return checkpointHint(err, src)
	}
	defer s.Close()
	warnUnmatched(opts.Policy, rf.userRules(opts.Policy), s, src, w)
	plan, err := makePlan(s, opts.Policy, opts.Codec)
	if err != nil {
		return err
	}
	plan.Source = src
	plan.Warnings = w.JSON()
	if asJSON {
		if err := writeJSON(cmd.OutOrStdout(), plan); err != nil {
			return err
		}
		return w.check()
	}
	printPlan(textOut(cmd), plan)
	return w.check()
}

func printPlan(w io.Writer, p *packPlan) {
	fmt.Fprintf(w, "plan for %s (dry run: headers read, no weight read, nothing written)\n", p.Source)
	rows := [][]string{{"TENSOR", "SHAPE", "DTYPE", "ACTION", "GRAN", "CODEC", "RULE", "SOURCE", "PROJECTED"}}
	for _, t := range p.Tensors {
		gran, rule, action := t.Granularity, fmt.Sprint(t.Rule), t.Action
		if gran == "" {
			gran = "-"
		}
		if t.Rule == 0 {
			rule = "-"
		}
		if t.Kind == manifest.KindKept && t.DType != t.SourceDType {
			action = "keep:" + strings.ToLower(t.DType)
		}
		rows = append(rows, []string{t.Name, report.FormatShape(t.Shape), t.SourceDType, action, gran, t.Codec, rule,
			fmt.Sprint(t.SourceBytes), fmt.Sprint(t.Bytes)})
	}
	printTable(w, rows, 6)
	tot := p.Totals
	fmt.Fprintln(w)
	fmt.Fprintf(w, "tensors    %d (%d ternary, %d int8, %d kept)\n", tot.Tensors, tot.TernaryTensors, tot.Int8Tensors, tot.KeptTensors)
	fmt.Fprintf(w, "projected  %s of sections from %s of source tensors (%s)\n",
		report.FormatBytes(tot.Bytes), report.FormatBytes(tot.SourceBytes), report.FormatSizeChange(ratio(tot.SourceBytes, tot.Bytes)))
	if tot.TernaryTensors > 0 {
		fmt.Fprintf(w, "ternary    %s weights at %.3f bits/weight (scales included)\n", report.FormatCount(tot.TernaryParams), tot.BitsPerTernary)
	}
	fmt.Fprintf(w, "policy     %s\n", strings.Join(p.Policy, "; "))
	fmt.Fprintf(w, "note       %s\n", p.Note)
}
