package convert

import (
	"errors"
	"fmt"
	"math"
)

// ScaleRule names how the absmean gamma becomes the number each weight is
// multiplied or divided by before rounding.
type ScaleRule string

const (
	// ScaleReciprocal is the training-code form: gamma is the mean of |W|
	// accumulated in float64 and rounded to float32, q = 1/max(gamma, eps)
	// computed in float32, trit = RoundClip(w*q, -1, 1) with the product
	// rounded to float32. The dequantization scale is 1/q in float32.
	ScaleReciprocal ScaleRule = "reciprocal"
	// ScaleQuotient is the paper form: d = gamma + eps computed in float64
	// and rounded to float32, trit = RoundClip(w/d, -1, 1) with the quotient
	// rounded to float32. The dequantization scale is d.
	ScaleQuotient ScaleRule = "quotient"
)

// TieRule names how a value exactly halfway between two integers rounds.
type TieRule string

const (
	// TieHalfEven rounds ±0.5 to 0 and ±1.5 to ±2 (then clipped to ±1), as
	// tensor libraries round.
	TieHalfEven TieRule = "half-even"
	// TieHalfAway rounds ±0.5 away from zero, to ±1.
	TieHalfAway TieRule = "half-away"
)

// DefaultEpsilon is the floor on gamma (reciprocal form) or the addend to
// gamma (quotient form).
const DefaultEpsilon = 1e-5

// Recipe is everything that decides the trits and the scale of a tensor.
// It is recorded in the manifest so that a verifier can redo the work.
type Recipe struct {
	Method      string    `json:"method"`
	ScaleRule   ScaleRule `json:"scale_rule"`
	Epsilon     float64   `json:"epsilon"`
	Tie         TieRule   `json:"tie"`
	Granularity string    `json:"granularity"`
}

// DefaultRecipe is absmean per tensor, training-code form, eps 1e-5,
// ties to even.
func DefaultRecipe() Recipe {
	return Recipe{
		Method:      "absmean",
		ScaleRule:   ScaleReciprocal,
		Epsilon:     DefaultEpsilon,
		Tie:         TieHalfEven,
		Granularity: "tensor",
	}
}

// ErrRecipe reports a recipe this version cannot apply.
var ErrRecipe = errors.New("unsupported recipe")

// Validate reports whether r can be applied.
func (r Recipe) Validate() error {
	switch {
	case r.Method != "absmean":
		return fmt.Errorf("%w: method %q (want \"absmean\")", ErrRecipe, r.Method)
	case r.ScaleRule != ScaleReciprocal && r.ScaleRule != ScaleQuotient:
		return fmt.Errorf("%w: scale rule %q (want %q or %q)", ErrRecipe, r.ScaleRule, ScaleReciprocal, ScaleQuotient)
	case r.Tie != TieHalfEven && r.Tie != TieHalfAway:
		return fmt.Errorf("%w: tie rule %q (want %q or %q)", ErrRecipe, r.Tie, TieHalfEven, TieHalfAway)
	case r.Granularity != "tensor":
		return fmt.Errorf("%w: granularity %q (want \"tensor\")", ErrRecipe, r.Granularity)
	case !(r.Epsilon > 0) || math.IsInf(r.Epsilon, 0) || float32(r.Epsilon) == 0:
		return fmt.Errorf("%w: epsilon %v (want a positive float32-representable number)", ErrRecipe, r.Epsilon)
	}
	return nil
}

// TritCounts counts the trits of a tensor by value.
type TritCounts struct {
	Neg  int64 `json:"neg"`
	Zero int64 `json:"zero"`
	Pos  int64 `json:"pos"`
}

// Total is the number of trits counted.
func (c TritCounts) Total() int64 { return c.Neg + c.Zero + c.Pos }

// Ternary is the outcome of ternarizing one tensor, besides its trits.
type Ternary struct {
	Scale     float32    // dequantized weight = Scale × trit
	Counts    TritCounts // trits by value
	RelRMSE   float64    // sqrt(Σ(w−Scale·t)² / Σw²), 0 when Σw² = 0
	MaxAbsErr float64    // max |w − Scale·t|
}

// NonFiniteError reports the first NaN or Inf in a tensor to be ternarized.
type NonFiniteError struct {
	Index int
	Value float32
}

func (e *NonFiniteError) Error() string {
	return fmt.Sprintf("%v: element %d is %v", ErrNonFinite, e.Index, e.Value)
}

func (e *NonFiniteError) Unwrap() error { return ErrNonFinite }

// Absmean returns gamma = mean |w|, accumulated in float64 in index order.
// It returns a *NonFiniteError for the first NaN or ±Inf element.
func Absmean(w []float32) (float64, error) {
	var sum float64
	for _, v := range w {
		sum += math.Abs(float64(v))
	}
	if math.IsNaN(sum) || math.IsInf(sum, 0) {
		for i, v := range w {
			if f := float64(v); math.IsNaN(f) || math.IsInf(f, 0) {
				return 0, &NonFiniteError{Index: i, Value: v}
			}
		}
	}
	if len(w) == 0 {
		return 0, nil
	}
	return sum / float64(len(w)), nil
}

// quantizer holds the float32 constants of a recipe applied to one gamma.
type quantizer struct {
	mul, div   float32 // exactly one is used: mul for reciprocal, div for quotient
	reciprocal bool
	halfAway   bool
	scale      float32
}

func newQuantizer(r Recipe, gamma float64) quantizer {
	q := quantizer{halfAway: r.Tie == TieHalfAway}
	if r.ScaleRule == ScaleQuotient {
		q.div = float32(gamma + r.Epsilon)
		q.scale = q.div
		return q
	}
	g := float32(gamma)
	if e := float32(r.Epsilon); g < e {
		g = e
	}
	q.reciprocal = true
	q.mul = float32(1) / g
	q.scale = float32(1) / q.mul
	return q
}

// trit applies RoundClip(x, -1, 1) to the float32 product or quotient.
// Rounding then clipping to [-1, 1] leaves only one decision: whether |x|
// reaches the rounding threshold 0.5 (exclusive for ties to even, inclusive
// for ties away from zero).
func (q quantizer) trit(w float32) int8 {
	var x float32
	if q.reciprocal {
		x = w * q.mul
	} else {
		x = w / q.div
	}
	switch {
	case x > 0.5 || (q.halfAway && x == 0.5):
		return 1
	case x < -0.5 || (q.halfAway && x == -0.5):
		return -1
	}
	return 0
}

// Ternarize quantizes w with recipe r into trits (len(trits) must equal
// len(w)) and returns the scale and statistics. The recipe must be valid.
func Ternarize(w []float32, r Recipe, trits []int8) (Ternary, error) {
	if len(trits) != len(w) {
		return Ternary{}, fmt.Errorf("ternarize: %d trits for %d weights", len(trits), len(w))
	}
	if err := r.Validate(); err != nil {
		return Ternary{}, err
	}
	gamma, err := Absmean(w)
	if err != nil {
		return Ternary{}, err
	}
	q := newQuantizer(r, gamma)
	var res Ternary
	res.Scale = q.scale
	var errSq, sigSq float64
	for i, v := range w {
		t := q.trit(v)
		trits[i] = t
		switch t {
		case 1:
			res.Counts.Pos++
		case -1:
			res.Counts.Neg++
		default:
			res.Counts.Zero++
		}
		d := math.Abs(float64(v) - float64(q.scale*float32(t)))
		errSq += d * d
		sigSq += float64(v) * float64(v)
		if d > res.MaxAbsErr {
			res.MaxAbsErr = d
		}
	}
	if sigSq > 0 {
		res.RelRMSE = math.Sqrt(errSq / sigSq)
	}
	return res, nil
}
