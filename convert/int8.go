package convert

import (
	"errors"
	"fmt"
	"math"
)

// QuantizeInt8Rows quantizes w, a tensor of cols columns, row by row with
// absmax scaling: s = max|row| / 127 in float32, q = clamp(round(w/s),
// −127, 127) with the quotient rounded to float32 and ties to even. An
// all-zero row has scale 0 and codes 0. It fills q (len(w) elements) and
// returns one scale per row.
func QuantizeInt8Rows(w []float32, cols int, q []int8) ([]float32, Stats, error) {
	if len(q) != len(w) {
		return nil, Stats{}, fmt.Errorf("int8: %d codes for %d weights", len(q), len(w))
	}
	r, err := NewInt8Rows(len(w), cols)
	if err != nil {
		return nil, Stats{}, err
	}
	if err := r.Add(w, q); err != nil {
		return nil, Stats{}, err
	}
	scales, stats := r.Result()
	return scales, stats, nil
}

// Int8Rows quantizes a tensor as QuantizeInt8Rows does, a run of whole
// rows at a time, so that the float32 copy of a large tensor can be taken
// in pieces: the codes, scales and statistics are those of one call over
// the whole tensor (the statistics are summed in element order either way).
type Int8Rows struct {
	size, n, done int
	scales        []float32
	acc           statsAccumulator
	zeros         int64
}

// NewInt8Rows prepares the quantization of n weights in rows of cols.
func NewInt8Rows(n, cols int) (*Int8Rows, error) {
	size, err := Granularity{Kind: GranRow}.GroupSize(n, cols)
	if err != nil {
		return nil, err
	}
	rows := 0
	if size > 0 {
		rows = n / size
	}
	return &Int8Rows{size: size, n: n, scales: make([]float32, 0, rows)}, nil
}

// RowSize returns the elements of one row (0 for a tensor of no columns).
func (r *Int8Rows) RowSize() int { return r.size }

// Add quantizes the next whole rows w into q (len(w) codes). A NaN or an
// infinity is refused, with its index counted from the tensor's start.
func (r *Int8Rows) Add(w []float32, q []int8) error {
	if len(q) != len(w) {
		return fmt.Errorf("int8: %d codes for %d weights", len(q), len(w))
	}
	if r.size == 0 || len(w)%r.size != 0 || r.done+len(w) > r.n {
		if len(w) == 0 {
			return nil
		}
		return fmt.Errorf("int8: %d weights are not whole rows of %d after %d of %d", len(w), r.size, r.done, r.n)
	}
	if err := nonFiniteIn(w); err != nil {
		var nf *NonFiniteError
		if errors.As(err, &nf) {
			nf.Index += r.done
		}
		return err
	}
	for k := 0; k < len(w); k += r.size {
		row := w[k : k+r.size]
		var absmax float32
		for _, v := range row {
			absmax = max(absmax, float32(math.Abs(float64(v))))
		}
		s := absmax / 127
		r.scales = append(r.scales, s)
		for i, v := range row {
			var c float64
			if s > 0 {
				c = math.RoundToEven(float64(v / s))
			}
			clipped := c > 127 || c < -127
			c = max(-127, min(127, c))
			q[k+i] = int8(c)
			if c == 0 {
				r.zeros++
			}
			r.acc.add(v, s*float32(c), clipped)
		}
	}
	r.done += len(w)
	return nil
}

// Result returns the scales (one per row) and the statistics of the rows
// added.
func (r *Int8Rows) Result() ([]float32, Stats) { return r.scales, r.acc.stats(r.zeros) }

// nonFiniteIn returns a *NonFiniteError for the first NaN or ±Inf in w.
func nonFiniteIn(w []float32) error {
	_, err := Absmean(w, SumStrided16)
	var nf *NonFiniteError
	if errors.As(err, &nf) {
		return err
	}
	return nil
}

// Tolerances of the per-element bounds, relative to the scale: the float32
// roundings of the scaled value and of the reconstruction. For ternary
// values near the thresholds 0.5 and 1.5 they are a few 2^-24; int8 codes
// reach 127, whose float32 spacing is 2^-17, for each of the two roundings.
const (
	TernaryBoundTolerance = 1e-6
	Int8BoundTolerance    = 1.0 / (1 << 16)
)

// Int8BoundExcess checks |w − s·q| ≤ s/2 (absmax/254) for per-row int8
// codes, returning the largest excess relative to s and its index.
func Int8BoundExcess(w []float32, q []int8, scales []float32, cols int) (float64, int) {
	var worst excessTracker
	for r, sc := range scales {
		s := float64(sc)
		best, at := math.Inf(-1), -1
		for i := r * cols; i < min((r+1)*cols, len(w)); i++ {
			if e := math.Abs(float64(w[i])-float64(sc*float32(q[i]))) - s/2; e > best {
				best, at = e, i
			}
		}
		worst.note(best, at, s)
	}
	return worst.result()
}

// excessTracker keeps the largest excess relative to its group's scale
// (the raw excess where the scale is 0) and its index.
type excessTracker struct {
	worst float64
	at    int
	seen  bool
}

func (t *excessTracker) note(excess float64, at int, scale float64) {
	if at < 0 {
		return
	}
	if scale > 0 {
		excess /= scale
	}
	if !t.seen || excess > t.worst {
		t.worst, t.at, t.seen = excess, at, true
	}
}

func (t *excessTracker) result() (float64, int) {
	if !t.seen {
		return 0, -1
	}
	return t.worst, t.at
}
