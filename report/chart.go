package report

import (
	"fmt"
	"math"
	"strconv"
	"unicode/utf8"
)

// Charts are horizontal bar charts drawn as inline SVG: one row per item,
// a column of row labels, and one or more panels side by side, each with
// its own axis. Coordinates are computed here; the template only places
// them.

const (
	chartWidth   = 880.0
	chartTop     = 34.0 // panel titles and tick labels above the rows
	rowHeight    = 18.0
	barHeight    = 11.0
	panelGap     = 28.0
	valueRoom    = 52.0 // right of each panel, for the value beside the bar
	labelCharW   = 6.6  // 11px monospace: 0.6 em per character
	valueCharW   = 6.0  // 10px monospace
	minLabelRoom = 80.0
	maxLabelRoom = 330.0
	markRoom     = 14.0 // below the rows, for the labels of reference lines
)

type chart struct {
	ID, Title     string
	Width, Height float64
	Labels        []chartLabel
	Panels        []chartPanel
}

type chartLabel struct {
	X, Y float64
	Text string
	W    float64 // width of the background behind a note (0 for row labels)
}

type chartPanel struct {
	Title      string
	X, TitleY  float64
	GridTop    float64
	GridBottom float64
	MarkBottom float64 // mark lines run past the grid to their labels
	Ticks      []chartTick
	Marks      []chartMarkLine // reference lines
	Bars       []chartBar
	Notes      []chartLabel // text in place of a bar
}

type chartTick struct {
	X    float64
	Text string
}

type chartMarkLine struct {
	X           float64
	Text, Class string
	Left        bool // the label goes left of the line (near the panel's right end)
}

type chartBar struct {
	Class, Key, Tip, Text string
	X, Y, W, H            float64
	TextX, TextY          float64
	// A range bar also has a span (SpanX to SpanX+SpanW, from the row's
	// Lo to its value) drawn over the bar from 0, and a tick at MidX.
	Range        bool
	Inside       bool // the text is drawn inside the bar
	SpanX, SpanW float64
	MidX         float64
}

// chartRow is one item to draw: its label and one value per panel; a NaN
// value draws a note instead of a bar. With Lo and Mid (per panel, set
// when not nil), the bar is a range from Lo to the value with a tick at
// Mid. Tip, when set, replaces the bar's tooltip.
type chartRow struct {
	Key, Label string
	Values     []float64
	Lo, Mid    []float64
	Classes    []string
	Notes      []string
	Tip        string
	Texts      []string // per panel, when set: the text beside (or inside) the bar
}

// chartAxis describes a panel: its title, the largest value it must show,
// how to write values, and reference marks.
type chartAxis struct {
	Title   string
	Max     float64
	Format  func(float64) string
	Percent bool // ticks as percentages of a fraction
	Marks   []chartMark
}

// chartMark is a reference line at a value; Class styles it ("" for the
// plain dashed line, "budget" for a limit).
type chartMark struct {
	Value float64
	Text  string
	Class string
}

func newChart(id, title string, axes []chartAxis, rows []chartRow) chart {
	c := chart{ID: id, Title: title, Width: chartWidth, Height: chartTop + rowHeight*float64(len(rows)) + 8}
	for _, ax := range axes {
		if len(ax.Marks) > 0 {
			c.Height += markRoom // mark labels go below the rows
			break
		}
	}
	labelRoom := minLabelRoom
	for _, r := range rows {
		labelRoom = max(labelRoom, labelCharW*float64(utf8.RuneCountInString(r.Label))+12)
	}
	labelRoom = min(labelRoom, maxLabelRoom)
	for i, r := range rows {
		text := []rune(r.Label)
		if limit := int(math.Floor((labelRoom-12)/labelCharW + 1e-6)); len(text) > limit {
			text = append([]rune("…"), text[len(text)-limit+1:]...) // the end of a name tells tensors apart
		}
		c.Labels = append(c.Labels, chartLabel{X: at(labelRoom - 8), Y: rowY(i) + barHeight - 1, Text: string(text)})
	}
	panelW := (chartWidth - labelRoom - panelGap*float64(len(axes)-1)) / float64(len(axes))
	plotW := panelW - valueRoom
	for p, ax := range axes {
		x0 := labelRoom + float64(p)*(panelW+panelGap)
		top, step := niceAxis(ax.Max)
		scale := plotW / top
		panel := chartPanel{Title: ax.Title, X: at(x0), TitleY: 12, GridTop: chartTop - 6, GridBottom: c.Height - 6, MarkBottom: c.Height - 6}
		if len(ax.Marks) > 0 {
			panel.GridBottom = c.Height - 6 - markRoom
		} else if c.Height > chartTop+rowHeight*float64(len(rows))+8 {
			panel.GridBottom = c.Height - 6 - markRoom
		}
		for v := 0.0; v <= top*(1+1e-9); v += step {
			text := trimNumber(v)
			if ax.Percent {
				text = trimNumber(100*v) + "%"
			}
			panel.Ticks = append(panel.Ticks, chartTick{X: at(x0 + v*scale), Text: text})
		}
		for _, m := range ax.Marks {
			if m.Value <= top {
				panel.Marks = append(panel.Marks, chartMarkLine{X: at(x0 + m.Value*scale), Text: m.Text, Class: m.Class,
					Left: m.Value*scale+labelCharW*float64(utf8.RuneCountInString(m.Text)) > panelW})
			}
		}
		for i, r := range rows {
			y := rowY(i)
			v := r.Values[p]
			if math.IsNaN(v) {
				panel.Notes = append(panel.Notes, chartLabel{X: at(x0 + 4), Y: y + barHeight - 1, Text: r.Notes[p],
					W: at(labelCharW*float64(utf8.RuneCountInString(r.Notes[p])) + 4)})
				continue
			}
			w := at(max(v*scale, 1)) // a zero still shows as a hairline
			bar := chartBar{
				Class: r.Classes[p], Key: r.Key, Tip: fmt.Sprintf("%s: %s %s", r.Label, ax.Title, ax.Format(v)),
				Text: ax.Format(v), X: at(x0), Y: y, W: w, H: barHeight, TextX: at(x0 + w + 4), TextY: y + barHeight - 1,
			}
			if r.Tip != "" {
				bar.Tip = r.Tip
			}
			if r.Lo != nil && r.Mid != nil {
				lo := r.Lo[p] * scale
				bar.Range, bar.SpanX, bar.SpanW, bar.MidX = true, at(x0+lo), at(max(v*scale-lo, 2)), at(x0+r.Mid[p]*scale)
			}
			if r.Texts != nil && r.Texts[p] != "" {
				bar.Text = r.Texts[p]
				// A long text goes inside a bar with room for it, else beside.
				if need := valueCharW*float64(utf8.RuneCountInString(bar.Text)) + 8; w > need+8 {
					bar.TextX, bar.Inside = at(x0+4), true
				}
			}
			panel.Bars = append(panel.Bars, bar)
		}
		c.Panels = append(c.Panels, panel)
	}
	return c
}

func rowY(i int) float64 { return chartTop + rowHeight*float64(i) }

// at rounds a coordinate to a tenth of a pixel, for short, stable output.
func at(v float64) float64 { return math.Round(v*10) / 10 }

// niceAxis returns an axis end at or above v and a tick step of 1, 2, 2.5
// or 5 times a power of ten that gives four to eight ticks.
func niceAxis(v float64) (top, step float64) {
	if !(v > 0) || math.IsInf(v, 0) {
		return 1, 0.25
	}
	mag := math.Pow(10, math.Floor(math.Log10(v)))
	for _, m := range []float64{0.1, 0.2, 0.25, 0.5, 1, 2, 2.5, 5, 10} {
		step = m * mag
		if math.Ceil(v/step-1e-9) <= 7 {
			break
		}
	}
	return step * math.Ceil(v/step-1e-9), step
}

// trimNumber writes a tick value without trailing zeros.
func trimNumber(v float64) string {
	return strconv.FormatFloat(math.Round(v*1e6)/1e6, 'f', -1, 64)
}
