package convert

import "math"

// Stats compares a source tensor with its reconstruction.
type Stats struct {
	ZeroFraction    float64 `json:"zero_fraction"`    // fraction of zero codes (trits, int8 values)
	ClippedFraction float64 `json:"clipped_fraction"` // fraction rounded beyond the code range and clipped
	RelRMSE         float64 `json:"rel_rmse"`         // sqrt(Σ(w−ŵ)² / Σw²), 0 when Σw² = 0
	MaxAbsErr       float64 `json:"max_abs_err"`      // max |w − ŵ|
	Cosine          float64 `json:"cosine"`           // Σwŵ / sqrt(Σw² Σŵ²); 1 when both are all zero
}

// statsAccumulator gathers Stats element by element, in float64.
type statsAccumulator struct {
	n, clipped        int64
	errSq, ww, hh, wh float64
	maxErr            float64
}

// add records one element w, its reconstruction h and whether it was clipped.
func (a *statsAccumulator) add(w, h float32, clipped bool) {
	fw, fh := float64(w), float64(h)
	d := math.Abs(fw - fh)
	a.n++
	a.errSq += d * d
	a.ww += fw * fw
	a.hh += fh * fh
	a.wh += fw * fh
	if d > a.maxErr {
		a.maxErr = d
	}
	if clipped {
		a.clipped++
	}
}

func (a *statsAccumulator) stats(zeros int64) Stats {
	s := Stats{MaxAbsErr: a.maxErr, Cosine: 1}
	if a.n > 0 {
		s.ZeroFraction = float64(zeros) / float64(a.n)
		s.ClippedFraction = float64(a.clipped) / float64(a.n)
	}
	if a.ww > 0 {
		s.RelRMSE = math.Sqrt(a.errSq / a.ww)
	}
	switch {
	case a.ww > 0 && a.hh > 0:
		s.Cosine = a.wh / math.Sqrt(a.ww*a.hh)
	case a.ww > 0 || a.hh > 0:
		s.Cosine = 0
	}
	return s
}

// CompareFloat32 gives the statistics of a lossless-or-rounded copy h of w
// (a kept tensor converted to another float dtype), with no zero codes.
func CompareFloat32(w, h []float32) Stats {
	var c Comparison
	c.Add(w, h)
	return c.Stats()
}

// Comparison is CompareFloat32 over a tensor given in pieces, in order:
// the statistics are those of one call over the whole.
type Comparison struct{ acc statsAccumulator }

// Add records the next elements w and their copies h.
func (c *Comparison) Add(w, h []float32) {
	for i := range w {
		c.acc.add(w[i], h[i], false)
	}
}

// Stats returns the statistics of the elements added.
func (c *Comparison) Stats() Stats { return c.acc.stats(0) }
