package convert

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/internal/testweights"
)

func recipeWith(rule ScaleRule, tie TieRule) Recipe {
	r := DefaultRecipe()
	r.ScaleRule, r.Tie = rule, tie
	return r
}

// Hand-worked example of the absmean formula (Ma et al. 2024, "The Era of
// 1-bit LLMs", eq. 1-3): W = [[0.8, -0.1], [0.3, -1.6]],
// gamma = (0.8+0.1+0.3+1.6)/4 = 0.7, W/gamma = [[1.143, -0.143], [0.429, -2.286]],
// round = [[1, 0], [0, -2]], clip to [-1, 1] = [[1, 0], [0, -1]].
func TestTernarizePaperExample(t *testing.T) {
	w := []float32{0.8, -0.1, 0.3, -1.6}
	gamma, err := Absmean(w, SumSequential)
	require.NoError(t, err)
	require.InDelta(t, 0.7, gamma, 1e-7)
	for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
		t.Run(string(rule), func(t *testing.T) {
			trits := make([]int8, 4)
			q, err := Ternarize(w, 2, PerTensor, recipeWith(rule, TieHalfEven), trits)
			require.NoError(t, err)
			require.Equal(t, []int8{1, 0, 0, -1}, trits)
			// the dequantization scale is gamma (quotient form: gamma + 1e-5)
			require.Equal(t, []float32{q.Scales[0]}, q.Scales)
			require.InDelta(t, 0.7, q.Scales[0], 2e-5)
			require.Equal(t, TritCounts{Neg: 1, Zero: 2, Pos: 1}, q.Counts)
			// reconstruction 0.7·[1, 0, 0, -1]: largest error |-1.6 - (-0.7)| = 0.9
			require.InDelta(t, 0.9, q.Stats.MaxAbsErr, 2e-5)
			// one of four rounds beyond ±1 (-2.286) and is clipped
			require.Equal(t, 0.25, q.Stats.ClippedFraction)
			require.Equal(t, 0.5, q.Stats.ZeroFraction)
			require.False(t, q.Exact)
		})
	}
}

// Ties: with gamma exactly 1, the products are exactly ±0.5 and ±1.5.
// Round half to even (IEEE 754 roundTiesToEven, as tensor libraries round)
// sends ±0.5 to 0 and ±1.5 to ±2, clipped to ±1; half-away sends ±0.5 to ±1.
// The quotient form divides by 1 + 1e-5, so nothing is an exact tie there.
func TestTernarizeTies(t *testing.T) {
	w := []float32{0.5, -0.5, 1.5, -1.5}
	cases := []struct {
		rule ScaleRule
		tie  TieRule
		want []int8
	}{
		{ScaleReciprocal, TieHalfEven, []int8{0, 0, 1, -1}},
		{ScaleReciprocal, TieHalfAway, []int8{1, -1, 1, -1}},
		{ScaleQuotient, TieHalfEven, []int8{0, 0, 1, -1}},
		{ScaleQuotient, TieHalfAway, []int8{0, 0, 1, -1}},
	}
	for _, c := range cases {
		t.Run(string(c.rule)+"/"+string(c.tie), func(t *testing.T) {
			trits := make([]int8, len(w))
			_, err := Ternarize(w, 4, PerTensor, recipeWith(c.rule, c.tie), trits)
			require.NoError(t, err)
			require.Equal(t, c.want, trits)
		})
	}
}

// For Gaussian weights gamma = σ·sqrt(2/π) and a weight rounds to zero when
// |w| < gamma/2 = 0.3989σ, so p(0) = erf(0.3989/√2) = 0.3101 (normal table:
// Φ(0.40) = 0.6554, 2Φ − 1 = 0.3108). 1M samples: standard error 0.0005.
func TestTernarizeGaussianZeroFraction(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	w := make([]float32, 1<<20)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * 0.02)
	}
	trits := make([]int8, len(w))
	q, err := Ternarize(w, len(w), PerTensor, DefaultRecipe(), trits)
	require.NoError(t, err)
	zero := float64(q.Counts.Zero) / float64(len(w))
	require.InDelta(t, 0.310, zero, 0.003)
	// the same value from the normal distribution itself (math.Erf)
	require.InDelta(t, math.Erf(math.Sqrt(2/math.Pi)/2/math.Sqrt2), zero, 0.003)
}

// The per-element bound (a property of RoundClip): for |w| ≤ 1.5·gamma,
// |w − gamma·t| ≤ gamma/2; beyond it, |w − gamma·t| = |w| − gamma.
func TestTernarizeElementBound(t *testing.T) {
	w := testweights.Gaussian(rand.New(rand.NewPCG(3, 4)), 4096)
	trits := make([]int8, len(w))
	for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
		q, err := Ternarize(w, 2, PerTensor, recipeWith(rule, TieHalfEven), trits)
		require.NoError(t, err)
		s := float64(q.Scales[0])
		slack := 1e-6 * s // float32 rounding of the product
		for i, v := range w {
			a := math.Abs(float64(v))
			d := math.Abs(float64(v) - s*float64(trits[i]))
			if a <= 1.5*s-slack {
				require.LessOrEqual(t, d, s/2+slack, "element %d = %v", i, v)
			} else if a > 1.5*s+slack {
				require.InDelta(t, a-s, d, slack, "element %d = %v", i, v)
			}
		}
		excess, _ := TernaryBoundExcess(w, trits, q.Scales, len(w))
		require.LessOrEqual(t, excess, TernaryBoundTolerance)
		// a wrong trit breaks the bound by far more than the tolerance
		i := slices.Index(trits, 0)
		trits[i] = 1
		excess, at := TernaryBoundExcess(w, trits, q.Scales, len(w))
		require.Greater(t, excess, 0.4)
		require.Equal(t, i, at)
	}
}

func TestTernarizeNonFinite(t *testing.T) {
	for _, bad := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
		w := []float32{1, 2, 3, bad, 5}
		_, err := Ternarize(w, len(w), PerTensor, DefaultRecipe(), make([]int8, len(w)))
		require.ErrorIs(t, err, ErrNonFinite)
		var nf *NonFiniteError
		require.True(t, errors.As(err, &nf))
		require.Equal(t, 3, nf.Index)
		require.Contains(t, err.Error(), "element 3")
	}
}

// An all-zero tensor takes the epsilon floor: all trits 0, error 0.
func TestTernarizeZeros(t *testing.T) {
	w := make([]float32, 10)
	trits := make([]int8, 10)
	q, err := Ternarize(w, len(w), PerTensor, DefaultRecipe(), trits)
	require.NoError(t, err)
	require.Equal(t, TritCounts{Zero: 10}, q.Counts)
	require.InDelta(t, DefaultEpsilon, q.Scales[0], 1e-10)
	require.Zero(t, q.Stats.RelRMSE)
	require.Zero(t, q.Stats.MaxAbsErr)
	require.Equal(t, 1.0, q.Stats.Cosine)
	require.True(t, q.Exact, "all zeros is already ternary")
}

func TestRecipeValidate(t *testing.T) {
	cases := []struct {
		name string
		edit func(*Recipe)
		want string
	}{
		{"method", func(r *Recipe) { r.Method = "absmax" }, `"absmax"`},
		{"rule", func(r *Recipe) { r.ScaleRule = "sqrt" }, `"sqrt"`},
		{"tie", func(r *Recipe) { r.Tie = "up" }, `"up"`},
		{"epsilon zero", func(r *Recipe) { r.Epsilon = 0 }, "epsilon 0"},
		{"epsilon tiny", func(r *Recipe) { r.Epsilon = 1e-60 }, "epsilon 1e-60"},
		{"epsilon huge", func(r *Recipe) { r.Epsilon = 1e30 }, "epsilon 1e+30"},
		{"epsilon past the range", func(r *Recipe) { r.Epsilon = 0.0101 }, "epsilon 0.0101"},
		{"epsilon infinite", func(r *Recipe) { r.Epsilon = math.Inf(1) }, "epsilon +Inf"},
		{"epsilon NaN", func(r *Recipe) { r.Epsilon = math.NaN() }, "epsilon NaN"},
	}
	require.NoError(t, DefaultRecipe().Validate())
	top := DefaultRecipe()
	top.Epsilon = MaxEpsilon
	require.NoError(t, top.Validate(), "the range is closed at its top")
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := DefaultRecipe()
			c.edit(&r)
			err := r.Validate()
			require.ErrorIs(t, err, ErrRecipe)
			require.Contains(t, err.Error(), c.want)
		})
	}
}

// Hand-worked examples of the absmean formula (Ma et al. 2024, eq. 1-3)
// applied per tensor, per row and per group of 2, on
// W = [[0.8, -0.1, 0.3, -1.6], [0.02, 0.04, -0.03, 0.012]]:
//   - tensor: gamma = 2.902/8 = 0.36275; row 0 / gamma = [2.21, -0.28, 0.83, -4.41]
//     → [1, 0, 1, -1]; row 1 is below gamma/2 everywhere → 0.
//   - row: gamma = 0.7 and 0.0255; row 1 / 0.0255 = [0.78, 1.57, -1.18, 0.47]
//     → [1, 1, -1, 0] (1.57 rounds to 2, clipped).
//   - group:2: gammas 0.45, 0.95, 0.03, 0.021; [1.78, -0.22 | 0.32, -1.68 |
//     0.67, 1.33 | -1.43, 0.57] → [1, 0 | 0, -1 | 1, 1 | -1, 1].
func TestTernarizeGranularityExamples(t *testing.T) {
	w := []float32{0.8, -0.1, 0.3, -1.6, 0.02, 0.04, -0.03, 0.012}
	cases := []struct {
		gran   string
		trits  []int8
		scales []float64
	}{
		{"tensor", []int8{1, 0, 1, -1, 0, 0, 0, 0}, []float64{0.36275}},
		{"row", []int8{1, 0, 0, -1, 1, 1, -1, 0}, []float64{0.7, 0.0255}},
		{"group:2", []int8{1, 0, 0, -1, 1, 1, -1, 1}, []float64{0.45, 0.95, 0.03, 0.021}},
	}
	for _, c := range cases {
		t.Run(c.gran, func(t *testing.T) {
			g, err := ParseGranularity(c.gran)
			require.NoError(t, err)
			trits := make([]int8, len(w))
			q, err := Ternarize(w, 4, g, DefaultRecipe(), trits)
			require.NoError(t, err)
			require.Equal(t, c.trits, trits)
			require.Len(t, q.Scales, len(c.scales))
			for i := range c.scales {
				require.InDelta(t, c.scales[i], q.Scales[i], 1e-6, "scale %d", i)
			}
		})
	}
}

// Zero fraction 0.310 for Gaussian weights (normal table, see above) holds
// at every granularity: each group is itself a Gaussian sample.
func TestTernarizeGaussianEveryGranularity(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	const rows, cols = 512, 1024
	w := make([]float32, rows*cols)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * 0.02)
	}
	trits := make([]int8, len(w))
	for _, gs := range []string{"tensor", "row", "group:128", "group:64"} {
		g, err := ParseGranularity(gs)
		require.NoError(t, err)
		q, err := Ternarize(w, cols, g, DefaultRecipe(), trits)
		require.NoError(t, err)
		require.InDelta(t, 0.310, q.Stats.ZeroFraction, 0.003, gs)
		require.Len(t, q.Scales, g.NumScales(len(w), cols), gs)
		excess, _ := TernaryBoundExcess(w, trits, q.Scales, len(w)/len(q.Scales))
		require.LessOrEqual(t, excess, TernaryBoundTolerance, gs)
	}
}

// A tensor already c_g × {-1, 0, +1} per group is found exact, keeps its
// exact scales and reconstructs with error 0, at every granularity.
func TestTernarizeExact(t *testing.T) {
	rng := rand.New(rand.NewPCG(10, 11))
	const rows, cols = 8, 16
	for _, gs := range []string{"tensor", "row", "group:4"} {
		g, err := ParseGranularity(gs)
		require.NoError(t, err)
		size, err := g.GroupSize(rows*cols, cols)
		require.NoError(t, err)
		w := make([]float32, rows*cols)
		want := make([]float32, len(w)/size)
		for k := range want {
			want[k] = float32(0.01 * float64(k+1) * (1 + rng.Float64()))
			for i := k * size; i < (k+1)*size; i++ {
				w[i] = want[k] * float32(rng.IntN(3)-1)
			}
			w[k*size] = want[k] // at least one nonzero per group
		}
		trits := make([]int8, len(w))
		q, err := Ternarize(w, cols, g, DefaultRecipe(), trits)
		require.NoError(t, err)
		require.True(t, q.Exact, gs)
		require.Equal(t, want, q.Scales, gs)
		require.Zero(t, q.Stats.MaxAbsErr, gs)
		require.Zero(t, q.Stats.RelRMSE, gs)
		for i := range w {
			require.Equal(t, w[i], q.Scales[i/size]*float32(trits[i]))
		}
		// two magnitudes in one group: no longer exact, absmean scales
		w[1] = w[0] / 2
		q, err = Ternarize(w, cols, g, DefaultRecipe(), trits)
		require.NoError(t, err)
		require.False(t, q.Exact, gs)
	}
}

// int8 absmax per row: the round-trip error is at most absmax/254 per
// element (common practice: half a quantization step of absmax/127).
func TestQuantizeInt8Rows(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 13))
	const rows, cols = 64, 96
	w := make([]float32, rows*cols)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * (1 + float64(i/cols)))
	}
	copy(w[5*cols:6*cols], make([]float32, cols)) // an all-zero row
	q := make([]int8, len(w))
	scales, stats, err := QuantizeInt8Rows(w, cols, q)
	require.NoError(t, err)
	require.Len(t, scales, rows)
	require.Zero(t, scales[5])
	for r := 0; r < rows; r++ {
		var absmax float64
		for _, v := range w[r*cols : (r+1)*cols] {
			absmax = math.Max(absmax, math.Abs(float64(v)))
		}
		for i := r * cols; i < (r+1)*cols; i++ {
			d := math.Abs(float64(w[i]) - float64(scales[r]*float32(q[i])))
			require.LessOrEqual(t, d, absmax/254*(1+Int8BoundTolerance), "element %d", i)
			require.LessOrEqual(t, int(q[i]), 127)
			require.GreaterOrEqual(t, int(q[i]), -127)
		}
	}
	excess, _ := Int8BoundExcess(w, q, scales, cols)
	require.LessOrEqual(t, excess, Int8BoundTolerance)
	require.Greater(t, stats.Cosine, 0.9999)
	require.Zero(t, stats.ClippedFraction)
}

func TestParseGranularity(t *testing.T) {
	for _, s := range []string{"tensor", "row", "group:1", "group:128"} {
		g, err := ParseGranularity(s)
		require.NoError(t, err)
		require.Equal(t, s, g.String())
	}
	for _, s := range []string{"", "rows", "group", "group:0", "group:-4", "group:x", "group:1.5", "group:064", "group:+64"} {
		_, err := ParseGranularity(s)
		require.ErrorIs(t, err, ErrGranularity, s)
		require.Contains(t, err.Error(), `"`+s+`"`)
	}
	g, _ := ParseGranularity("group:64")
	_, err := g.GroupSize(100*96, 96)
	require.ErrorIs(t, err, ErrGranularity)
	require.Contains(t, err.Error(), "96")
}
