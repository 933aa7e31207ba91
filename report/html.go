package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"sort"
	"strings"

	"ternkit/convert"
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
	"wrapName":   wrapName,
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
	Page
	Cautions   []string
	Worst      *Tensor // lossy ternary tensor with the largest relative error
	Exact      int     // ternary tensors stored losslessly
	Sum        string  // the recipe's sum order, "sequential" when absent
	LayerChart chart
	ErrorChart chart
}

// log2Of3 is the information content of one trit, log2(3) bits: no trit
// code can use fewer bits per weight on average (common practice).
const log2Of3 = 1.5849625007211562

// WriteHTML writes the summary as one self-contained HTML page: no script,
// no network, charts as inline SVG. The same summary gives the same bytes.
func WriteHTML(w io.Writer, s *Summary) error { return WritePage(w, s, Page{}) }

// WritePage writes the page with what p adds: a verification's verdicts
// and the budget lines.
func WritePage(w io.Writer, s *Summary, p Page) error {
	layers := s.Layers()
	d := pageData{Summary: s, Page: p, Cautions: cautions, LayerChart: layerChart(layers), ErrorChart: errorChart(layers, p.Budget)}
	d.Sum = string(s.Recipe.Sum)
	if d.Sum == "" {
		d.Sum = "sequential"
	}
	for i := range s.Tensors {
		t := &s.Tensors[i]
		if t.Ternary() && t.Exact {
			d.Exact++
		}
		if t.Ternary() && !t.Exact && (d.Worst == nil || t.RelRMSE > d.Worst.RelRMSE) {
			d.Worst = t
		}
	}
	if err := page.Execute(w, d); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

// keptLabel names the stored dtypes of a layer of kept tensors.
func keptLabel(dtypes []string) string {
	parts := make([]string, len(dtypes))
	for i, d := range dtypes {
		parts[i] = d
		if size, ok := convert.DTypeSize(d); ok {
			parts[i] = fmt.Sprintf("%s, %d bits", d, 8*size)
		}
	}
	return "kept (" + strings.Join(parts, "; ") + ")"
}

// layerChart draws, per layer, the bits per weight of its ternary and int8
// tensors on one scale (a layer of kept tensors only gets a label, so that
// 16- or 32-bit layers do not flatten the rest) and its zero trits.
func layerChart(layers []Layer) chart {
	maxBits := log2Of3
	rows := make([]chartRow, len(layers))
	for i, l := range layers {
		r := chartRow{Key: l.Name, Label: l.Name, Values: []float64{l.QuantizedBits, l.ZeroFraction},
			Classes: []string{"bits", "zero"}, Notes: []string{"", ""}}
		if l.Quantized == 0 {
			r.Values[0], r.Notes[0] = math.NaN(), keptLabel(l.KeptDTypes)
		} else {
			maxBits = max(maxBits, l.QuantizedBits)
			if l.TernaryTensors == 0 {
				r.Classes[0] = "bits int8"
			}
		}
		if l.TernaryTensors == 0 {
			r.Values[1], r.Notes[1] = math.NaN(), "no ternary tensors"
		}
		rows[i] = r
	}
	return newChart("layer-chart", "Bits per weight and zero trits, per layer", []chartAxis{
		{Title: "bits per weight (ternary and int8 tensors)", Max: maxBits, Format: func(f float64) string { return fmt.Sprintf("%.2f", f) },
			Marks: []chartMark{{Value: log2Of3, Text: "log₂3"}}},
		{Title: "zero trits (ternary tensors)", Max: 1, Percent: true, Format: func(f float64) string { return fmt.Sprintf("%.1f%%", 100*f) }},
	}, rows)
}

// errorChart summarizes, per layer with ternary or int8 tensors, their
// relative RMSE: the span from the smallest to the largest, the median
// marked; a layer whose tensors are all stored exactly is labelled
// "exact". Budget limits are drawn as lines.
func errorChart(layers []Layer, budget []BudgetLine) chart {
	var rows []chartRow
	worst := 0.0
	for _, l := range layers {
		if l.Quantized == 0 {
			continue
		}
		r := chartRow{Key: l.Name, Label: l.Name, Values: []float64{l.ErrMax}, Lo: []float64{l.ErrMin}, Mid: []float64{l.ErrMedian},
			Classes: []string{"err"}, Notes: []string{""}}
		if l.Lossy == 0 {
			r.Values[0], r.Notes[0] = math.NaN(), "exact"
			if l.Exact > 1 {
				r.Notes[0] = fmt.Sprintf("exact (%d tensors)", l.Exact)
			}
		} else {
			worst = max(worst, l.ErrMax)
			r.Texts = []string{fmt.Sprintf("%.4f (1 tensor)", l.ErrMax)}
			if l.Lossy > 1 {
				r.Texts[0] = fmt.Sprintf("min %.4f · median %.4f · max %.4f (%d tensors)", l.ErrMin, l.ErrMedian, l.ErrMax, l.Lossy)
			}
			r.Tip = fmt.Sprintf("%s: %d tensors, relative RMSE min %.4f, median %.4f, max %.4f", l.Name, l.Lossy, l.ErrMin, l.ErrMedian, l.ErrMax)
			if l.Exact > 0 {
				r.Tip += fmt.Sprintf("; %d more exact", l.Exact)
			}
		}
		rows = append(rows, r)
	}
	var marks []chartMark
	for _, b := range budget {
		worst = max(worst, b.Value)
		text := fmt.Sprintf("budget %g", b.Value)
		if b.Match != "*" {
			text += " (" + b.Match + ")"
		}
		marks = append(marks, chartMark{Value: b.Value, Text: text, Class: "budget"})
	}
	return newChart("error-chart", "Relative error per layer: smallest, median and largest", []chartAxis{
		{Title: "relative RMSE against the source (span min to max, tick at the median)", Max: worst,
			Format: func(f float64) string { return fmt.Sprintf("%.4f", f) }, Marks: marks},
	}, rows)
}

// wrapName writes a tensor name with a line-break opportunity after each
// separator (. _ / -), so that a long name wraps between its parts, not
// inside a word.
func wrapName(name string) template.HTML {
	var b strings.Builder
	start := 0
	for i := 0; i < len(name); i++ {
		switch name[i] {
		case '.', '_', '/', '-':
			b.WriteString(template.HTMLEscapeString(name[start : i+1]))
			b.WriteString("<wbr>")
			start = i + 1
		}
	}
	b.WriteString(template.HTMLEscapeString(name[start:]))
	return template.HTML(b.String())
}
