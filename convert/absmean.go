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

// SumOrder names the order in which gamma's float64 sum of |w| is taken.
// Floating-point addition is not associative, so the order is part of the
// recipe: a verifier must add in the same order to get the same gamma.
type SumOrder string

const (
	// SumStrided16 adds |w_i| (as float64) to partial sum p_(i mod 16), each
	// partial sum in index order from +0, and combines them as
	// (t0 + t2) + (t1 + t3) with t_k = (p_k + p_(k+4)) + (p_(k+8) + p_(k+12))
	// (combineLanes16). Sixteen independent sums let vector units add many
	// weights per cycle; the statistics of the quantize pass are gathered
	// in lanes too (see laneTotals).
	SumStrided16 SumOrder = "strided16"
	// SumSequential adds |w_i| into one float64 sum in index order. Recipes
	// recorded without a sum order (the key is absent) use it.
	SumSequential SumOrder = "sequential"
	// SumBlocked16 (format 1.4) splits a group into blocks of SumBlock
	// elements from its first element, sums each block as SumStrided16 does
	// (its own sixteen partial sums from +0 and the same combination) into
	// b_0 … b_(n−1), and adds those in order: A = (…((0 + b_0) + b_1) + …)
	// + b_(n−1). Blocks can be summed in parallel and combined in a fixed
	// order, so one large tensor can use every core and give the same bits.
	// For a group of at most SumBlock elements it is SumStrided16.
	SumBlocked16 SumOrder = "blocked16"
)

// SumBlock is the block of SumBlocked16, in elements (2^20).
const SumBlock = 1 << 20

// DefaultEpsilon is the floor on gamma (reciprocal form) or the addend to
// gamma (quotient form).
const DefaultEpsilon = 1e-5

// MaxEpsilon is the largest epsilon a recipe may have (pack/FORMAT.md,
// "Recipe"): epsilon only keeps an all-zero group from dividing by zero,
// and a larger one swamps gamma itself (1e30 turns every trit to 0).
const MaxEpsilon = 1e-2

// Recipe is everything besides the granularity that decides the trits and
// scales of a tensor. It is recorded in the manifest so that a verifier can
// redo the work.
type Recipe struct {
	Method    string    `json:"method"`
	ScaleRule ScaleRule `json:"scale_rule"`
	Epsilon   float64   `json:"epsilon"`
	Tie       TieRule   `json:"tie"`
	// Sum is the order of gamma's sum; "" means SumSequential.
	Sum SumOrder `json:"sum,omitempty"`
}

// DefaultRecipe is absmean, training-code form, eps 1e-5, ties to even,
// gamma summed in blocks of 16 strided partial sums (SumBlocked16).
func DefaultRecipe() Recipe {
	return Recipe{
		Method:    "absmean",
		ScaleRule: ScaleReciprocal,
		Epsilon:   DefaultEpsilon,
		Tie:       TieHalfEven,
		Sum:       SumBlocked16,
	}
}

// sumOrder is r.Sum, with the absent order read as SumSequential.
func (r Recipe) sumOrder() SumOrder {
	if r.Sum == "" {
		return SumSequential
	}
	return r.Sum
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
	case r.sumOrder() != SumBlocked16 && r.sumOrder() != SumStrided16 && r.sumOrder() != SumSequential:
		return fmt.Errorf("%w: sum order %q (want %q, %q or %q)", ErrRecipe, r.Sum, SumBlocked16, SumStrided16, SumSequential)
	case !(r.Epsilon > 0) || r.Epsilon > MaxEpsilon || float32(r.Epsilon) == 0:
		return fmt.Errorf("%w: epsilon %v (want a float32-representable number in (0, %g])", ErrRecipe, r.Epsilon, MaxEpsilon)
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

// Count adds trits to c.
func (c *TritCounts) Count(trits []int8) {
	for _, v := range trits {
		switch v {
		case 1:
			c.Pos++
		case -1:
			c.Neg++
		default:
			c.Zero++
		}
	}
}

// Ternary is the outcome of ternarizing one tensor, besides its trits.
type Ternary struct {
	// Scales holds one dequantization scale per group, in C order:
	// dequantized weight = Scales[i / GroupSize] × trit[i].
	Scales []float32
	// Exact is set when every group already was scale × {-1, 0, +1}: the
	// scales are those exact values and the reconstruction is lossless.
	Exact  bool
	Counts TritCounts
	Stats  Stats
}

// NonFiniteError reports the first NaN or Inf in a tensor to be quantized.
type NonFiniteError struct {
	Index int
	Value float32
}

func (e *NonFiniteError) Error() string {
	return fmt.Sprintf("%v: element %d is %v", ErrNonFinite, e.Index, e.Value)
}

func (e *NonFiniteError) Unwrap() error { return ErrNonFinite }

// firstNonFinite returns a *NonFiniteError for the first NaN or ±Inf in w.
func firstNonFinite(w weights, base int) error {
	for i := range w.len() {
		if v := w.at(i); math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return &NonFiniteError{Index: base + i, Value: v}
		}
	}
	return nil
}

// Absmean returns gamma = mean |w|, accumulated in float64 in the given
// order. It returns a *NonFiniteError for the first NaN or ±Inf element.
func Absmean(w []float32, order SumOrder) (float64, error) {
	gamma, _, err := absmeanAndSquares(weights{f32: w}, order)
	return gamma, err
}

// absmeanAndSquares is Absmean, and Σw² from the same pass (partial sums in
// a fixed order: statistics only, unlike gamma).
func absmeanAndSquares(w weights, order SumOrder) (gamma, sumSq float64, err error) {
	var sum float64
	if order == SumBlocked16 {
		for lo := 0; lo < w.len(); lo += SumBlock {
			b, q := pieceSums(w.slice(lo, min(lo+SumBlock, w.len())), order)
			sum += b
			sumSq += q
		}
	} else {
		sum, sumSq = pieceSums(w, order)
	}
	if math.IsNaN(sum) || math.IsInf(sum, 0) {
		if err := firstNonFinite(w, 0); err != nil {
			return 0, 0, err
		}
	}
	if w.len() == 0 {
		return 0, 0, nil
	}
	return sum / float64(w.len()), sumSq, nil
}

// pieceSums is Σ|w| in the order's rule (for SumBlocked16, w is one block:
// its b) and Σw² (statistics only).
func pieceSums(w weights, order SumOrder) (sum, sumSq float64) {
	if order != SumSequential {
		var s, q [16]float64
		absLanes16(w, &s, &q)
		return combineLanes16(&s), combineLanes16(&q)
	}
	var sq [2]float64
	for i := range w.len() {
		a := float64(abs32(w.at(i)))
		sum += a
		sq[i&1] += float64(a * a) // the conversion forbids a fused multiply-add
	}
	return sum, sq[0] + sq[1]
}

// quantizer holds the float32 constants of a recipe applied to one gamma.
type quantizer struct {
	mul, div   float32 // mul for the reciprocal form, div for the quotient form
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

// exactQuantizer maps ±c to ±1 and 0 to 0 for a group already ternary.
func exactQuantizer(c float32) quantizer {
	return quantizer{reciprocal: true, mul: 1 / c, scale: c}
}

// scaled is the float32 product (or quotient) that RoundClip rounds.
func (q quantizer) scaled(w float32) float32 {
	if q.reciprocal {
		return w * q.mul
	}
	return w / q.div
}

// exactScale returns c when every element of w is 0 or ±c for one c > 0,
// and whether it is so. An all-zero group has no exact scale.
func exactScale(w weights) (float32, bool) {
	var c float32
	for i := range w.len() {
		v := w.at(i)
		if v == 0 {
			continue
		}
		a := float32(math.Abs(float64(v)))
		if c == 0 {
			c = a
		} else if a != c {
			return 0, false
		}
	}
	return c, c != 0 && !math.IsInf(float64(c), 0) && !math.IsNaN(float64(c))
}

// Ternarize quantizes w, a tensor of cols columns, group by group as g says,
// with recipe r. trits must have len(w) elements. The recipe and
// granularity must be valid for the tensor (see Granularity.GroupSize).
//
// When every group is already exactly c_g × {-1, 0, +1} (all-zero groups
// included), the result is Exact: the scales are the c_g (the recipe's
// scale for an all-zero group) and the reconstruction error is 0.
func Ternarize(w []float32, cols int, g Granularity, r Recipe, trits []int8) (Ternary, error) {
	if len(trits) != len(w) {
		return Ternary{}, fmt.Errorf("ternarize: %d trits for %d weights", len(trits), len(w))
	}
	return ternarize(weights{f32: w}, cols, g, r, &tritOut{all: trits})
}

// Weights are a tensor's values as TernarizeStream reads them.
type Weights struct{ w weights }

// Float32Weights are float32 values.
func Float32Weights(w []float32) Weights { return Weights{weights{f32: w}} }

// BF16Weights are little-endian BF16 values, 2 bytes each, read in place
// by the kernels; raw must have an even length.
func BF16Weights(raw []byte) Weights {
	if raw == nil {
		raw = []byte{}
	}
	return Weights{weights{bf16: raw[:len(raw)&^1]}}
}

// Len is the number of weights.
func (w Weights) Len() int { return w.w.len() }

// TernarizeStream is Ternarize that hands the trits to emit in order, a
// run of at most a few hundred at a time, instead of storing them: a
// caller that encodes them as they come touches each trit while it is in
// cache and needs no buffer the size of the tensor. emit must not keep the
// slice; an error from emit stops the work and is returned.
func TernarizeStream(w Weights, cols int, g Granularity, r Recipe, emit func(trits []int8) error) (Ternary, error) {
	return TernarizeSplit(w, cols, g, r, Split{Range: func(int, int) func([]int8) error { return emit }})
}

// tritOut is where the quantize pass puts trits: the whole tensor's slice,
// or one block's scratch handed to emit when the block is done.
type tritOut struct {
	all  []int8
	buf  []int8
	emit func([]int8) error
	err  error
}

// block is the space for the n trits starting at trit start.
func (o *tritOut) block(start, n int) []int8 {
	if o.all != nil {
		return o.all[start : start+n]
	}
	return o.buf[:n]
}

// done passes a finished block on, when streaming.
func (o *tritOut) done(t []int8) {
	if o.emit != nil && o.err == nil {
		o.err = o.emit(t)
	}
}

// groupTotals is what the passes over a group gather: the element count with
// a nonzero trit, the sum of the trits, the count of clipped values, Σ|w|
// over the nonzero trits, Σw² (from the absmean pass), and the largest
// |w − scale·trit|.
type groupTotals struct {
	nonzero, tritSum, clipped int64
	absNonzero, sumSq, maxErr float64
}

// threshold is th such that t = +1 when x > th and −1 when x < −th: 0.5
// for ties to even, the float32 just below 0.5 for ties away (x ≥ 0.5).
// Rounding then clipping to [-1, 1] (RoundClip) leaves only this decision.
func (q quantizer) threshold() float32 {
	if q.halfAway {
		return math.Nextafter32(0.5, 0)
	}
	return 0.5
}

// quantizeGroup writes the trits of one group and returns its totals,
// gathered in lanes (laneTotals) or, for recipes of the sequential sum
// order, in the order of earlier versions (tally).
func (q quantizer) quantizeGroup(w weights, out *tritOut, base int, lanes bool) groupTotals {
	th := q.threshold()
	var g groupTotals
	n := w.len()
	if lanes {
		for start := 0; start < n; start += laneBlock {
			end := min(start+laneBlock, n)
			var l laneTotals
			t := out.block(base+start, end-start)
			quantizeBlock(w.slice(start, end), t, q, &l)
			g.addLanes(&l)
			out.done(t)
		}
		return g
	}
	var xs, vs [512]float32
	for start := 0; start < n; start += len(xs) {
		v := w.slice(start, min(start+len(xs), n)).float32s(vs[:])
		x := xs[:len(v)]
		if q.reciprocal {
			for i := range v {
				x[i] = v[i] * q.mul
			}
		} else {
			for i := range v {
				x[i] = v[i] / q.div
			}
		}
		t := out.block(base+start, len(v))
		g.tally(v, x, t, th, float64(q.scale))
		out.done(t)
	}
	return g
}

// tally writes the trits of weights v with scaled values x and adds their
// totals to g, without branches on the data: trits are random, so a branch
// per element would be mispredicted about half the time.
func (g *groupTotals) tally(v, x []float32, trits []int8, th float32, scale float64) {
	var nonzero, tritSum, clipped int64
	var absNonzero, maxErr float32 // a block of at most 512: float32 sums lose little
	s := float32(scale)
	x = x[:len(v)]
	trits = trits[:len(v)]
	for i := range v {
		pos, neg := b2i(x[i] > th), b2i(x[i] < -th)
		nz := pos + neg
		nonzero += nz
		tritSum += pos - neg
		trits[i] = int8(pos - neg)
		ax := math.Float32frombits(math.Float32bits(x[i]) &^ (1 << 31))
		clipped += b2i(ax >= 1.5)
		m := math.Float32frombits(math.Float32bits(v[i]) &^ (1 << 31))
		nzf := float32(nz)
		absNonzero += m * nzf
		e := m - s*nzf
		e = math.Float32frombits(math.Float32bits(e) &^ (1 << 31))
		if e > maxErr {
			maxErr = e
		}
	}
	g.nonzero += nonzero
	g.tritSum += tritSum
	g.clipped += clipped
	g.absNonzero += float64(absNonzero)
	g.maxErr = max(g.maxErr, float64(maxErr))
}

func b2i(b bool) int64 {
	if b {
		return 1
	}
	return 0
}

// groupSums adds the totals of a tensor's groups, each with its scale s:
// Σw·ŵ = s·Σ|w| over nonzero trits (ŵ = s·sign(w) there), Σŵ² = s²·nonzero.
type groupSums struct {
	nonzero, tritSum, clipped int64
	sumSq, cross, reconSq     float64
	maxErr                    float64
}

func (t *groupSums) add(g groupTotals, scale float32) {
	s := float64(scale)
	t.nonzero += g.nonzero
	t.tritSum += g.tritSum
	t.clipped += g.clipped
	t.sumSq += g.sumSq
	t.cross += s * g.absNonzero
	t.reconSq += s * s * float64(g.nonzero)
	t.maxErr = max(t.maxErr, g.maxErr)
}

func (t *groupSums) counts(n int64) TritCounts {
	return TritCounts{Pos: (t.nonzero + t.tritSum) / 2, Neg: (t.nonzero - t.tritSum) / 2, Zero: n - t.nonzero}
}

// stats derives the statistics: Σ(w − ŵ)² = Σw² − 2Σwŵ + Σŵ², which is 0
// by definition for an exact tensor.
func (t *groupSums) stats(n int64, exact bool) Stats {
	s := Stats{Cosine: 1}
	if n == 0 {
		return s
	}
	s.ZeroFraction = float64(n-t.nonzero) / float64(n)
	s.ClippedFraction = float64(t.clipped) / float64(n)
	if exact {
		return s
	}
	s.MaxAbsErr = t.maxErr
	if t.sumSq > 0 {
		s.RelRMSE = math.Sqrt(max(0, t.sumSq-2*t.cross+t.reconSq) / t.sumSq)
	}
	switch {
	case t.sumSq > 0 && t.reconSq > 0:
		s.Cosine = t.cross / math.Sqrt(t.sumSq*t.reconSq)
	case t.sumSq > 0 || t.reconSq > 0:
		s.Cosine = 0
	}
	return s
}
