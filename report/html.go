package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"sort"
)

// cautions are printed on every page, above the numbers.
var cautions = []string{
	"Post-training ternarization of a model that was not trained for ternary weights loses much accuracy. These numbers describe the packing, not how well the model still works.",
	"A passing verify proves bytes and bounds: the artifact is intact and is what the recorded recipe makes of the source. It says nothing about task quality. This page reads the manifest only; run ternkit verify for the bytes.",
	"Evaluate the packed model on your own tasks, in the runtime you ship, before deployment, and follow your organisation's release practice.",
}

//go:embed page.html.tmpl
var pageSource string

var page = template.Must(template.New("page").Funcs(template.FuncMap{
	"bytes":      FormatBytes,
	"count":      FormatCount,
	"shape":      FormatShape,
	"sizeChange": FormatSizeChange,
	"pct":        func(f float64) string { return fmt.Sprintf("%.1f%%", 100*f) },
	"f3":         func(f float64) string { return fmt.Sprintf("%.3f", f) },
	"f4":         func(f float64) string { return fmt.Sprintf("%.4f", f) },
	"n1":         func(f float64) string { return fmt.Sprintf("%.1f", f) },
	"sortedKeys": func(m map[string]string) []string {
		keys := make([]string, 0, len(m))
		for k := range m {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		return keys
	},
}).Parse(pageSource))

// pageData is what the template draws.
type pageData struct {
	*Summary
	Cautions   []string
	Worst      *Tensor // ternary tensor with the largest relative error
	LayerChart chart
	ErrorChart chart
}

// log2Of3 is the information content of one trit, log2(3) bits: no trit
// code can use fewer bits per weight on average (common practice).
const log2Of3 = 1.5849625007211562

// WriteHTML writes the summary as one self-contained HTML page: no script,
// no network, charts as inline SVG. The same summary gives the same bytes.
func WriteHTML(w io.Writer, s *Summary) error {
	d := pageData{Summary: s, Cautions: cautions, LayerChart: layerChart(s), ErrorChart: errorChart(s)}
	for i := range s.Tensors {
		t := &s.Tensors[i]
		if t.Ternary() && (d.Worst == nil || t.RelRMSE > d.Worst.RelRMSE) {
			d.Worst = t
		}
	}
	if err := page.Execute(w, d); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

// layerChart draws bits per weight and zero fraction per layer.
func layerChart(s *Summary) chart {
	layers := s.Layers()
	maxBits := log2Of3
	rows := make([]chartRow, len(layers))
	for i, l := range layers {
		maxBits = max(maxBits, l.BitsPerWeight)
		r := chartRow{Key: l.Name, Label: l.Name, Values: []float64{l.BitsPerWeight, l.ZeroFraction},
			Classes: []string{"bits", "zero"}, Notes: []string{"", ""}}
		if l.TernaryTensors == 0 {
			r.Classes[0] = "bits kept"
			r.Values[1], r.Notes[1] = math.NaN(), "no ternary tensors"
		}
		rows[i] = r
	}
	return newChart("layer-chart", "Bits per weight and zero trits, per layer", []chartAxis{
		{Title: "bits per weight (all tensors of the layer)", Max: maxBits, Format: func(f float64) string { return fmt.Sprintf("%.2f", f) },
			Marks: []chartMark{{log2Of3, "log₂3"}}},
		{Title: "zero trits (ternary tensors)", Max: 1, Percent: true, Format: func(f float64) string { return fmt.Sprintf("%.1f%%", 100*f) }},
	}, rows)
}

// errorChart draws the relative RMSE of every ternary tensor.
func errorChart(s *Summary) chart {
	var rows []chartRow
	var worst float64
	for _, t := range s.Tensors {
		if !t.Ternary() {
			continue
		}
		worst = max(worst, t.RelRMSE)
		rows = append(rows, chartRow{Key: t.Name, Label: t.Name, Values: []float64{t.RelRMSE},
			Classes: []string{"err"}, Notes: []string{""}})
	}
	return newChart("error-chart", "Relative error of each ternary tensor", []chartAxis{
		{Title: "relative RMSE against the source", Max: worst, Format: func(f float64) string { return fmt.Sprintf("%.4f", f) }},
	}, rows)
}
