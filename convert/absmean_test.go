package convert

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
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
	gamma, err := Absmean(w)
	require.NoError(t, err)
	require.InDelta(t, 0.7, gamma, 1e-7)
	for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
		t.Run(string(rule), func(t *testing.T) {
			trits := make([]int8, 4)
			q, err := Ternarize(w, recipeWith(rule, TieHalfEven), trits)
			require.NoError(t, err)
			require.Equal(t, []int8{1, 0, 0, -1}, trits)
			// the dequantization scale is gamma (quotient form: gamma + 1e-5)
			require.InDelta(t, 0.7, q.Scale, 2e-5)
			require.Equal(t, TritCounts{Neg: 1, Zero: 2, Pos: 1}, q.Counts)
			// reconstruction 0.7·[1, 0, 0, -1]: largest error |-1.6 - (-0.7)| = 0.9
			require.InDelta(t, 0.9, q.MaxAbsErr, 2e-5)
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
			_, err := Ternarize(w, recipeWith(c.rule, c.tie), trits)
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
	q, err := Ternarize(w, DefaultRecipe(), trits)
	require.NoError(t, err)
	zero := float64(q.Counts.Zero) / float64(len(w))
	require.InDelta(t, 0.310, zero, 0.003)
	// the same value from the normal distribution itself (math.Erf)
	require.InDelta(t, math.Erf(math.Sqrt(2/math.Pi)/2/math.Sqrt2), zero, 0.003)
}

// The per-element bound (a property of RoundClip): for |w| ≤ 1.5·gamma,
// |w − gamma·t| ≤ gamma/2; beyond it, |w − gamma·t| = |w| − gamma.
func TestTernarizeElementBound(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	w := make([]float32, 4096)
	for i := range w {
		w[i] = float32(rng.NormFloat64())
	}
	trits := make([]int8, len(w))
	for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
		q, err := Ternarize(w, recipeWith(rule, TieHalfEven), trits)
		require.NoError(t, err)
		s := float64(q.Scale)
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
	}
}

func TestTernarizeNonFinite(t *testing.T) {
	for _, bad := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
		w := []float32{1, 2, 3, bad, 5}
		_, err := Ternarize(w, DefaultRecipe(), make([]int8, len(w)))
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
	q, err := Ternarize(w, DefaultRecipe(), trits)
	require.NoError(t, err)
	require.Equal(t, TritCounts{Zero: 10}, q.Counts)
	require.InDelta(t, DefaultEpsilon, q.Scale, 1e-10)
	require.Zero(t, q.RelRMSE)
	require.Zero(t, q.MaxAbsErr)
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
		{"granularity", func(r *Recipe) { r.Granularity = "block" }, `"block"`},
		{"epsilon zero", func(r *Recipe) { r.Epsilon = 0 }, "epsilon 0"},
		{"epsilon tiny", func(r *Recipe) { r.Epsilon = 1e-60 }, "epsilon 1e-60"},
	}
	require.NoError(t, DefaultRecipe().Validate())
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

func TestDefaultPolicy(t *testing.T) {
	cases := []struct {
		name  string
		dtype string
		shape []int64
		want  Action
	}{
		{"blocks.0.attn.q.weight", "BF16", []int64{4, 4}, ActionTernary},
		{"blocks.0.mlp.up.weight", "F32", []int64{8, 4}, ActionTernary},
		{"embed.tokens.weight", "BF16", []int64{16, 4}, ActionKeep},
		{"lm_head.weight", "F16", []int64{16, 4}, ActionKeep},
		{"blocks.0.attn_norm.weight", "BF16", []int64{4}, ActionKeep},
		{"blocks.0.conv.weight", "F32", []int64{4, 4, 3}, ActionKeep},
		{"blocks.0.qmap", "I8", []int64{4, 4}, ActionKeep},
	}
	for _, c := range cases {
		got := DefaultPolicy(&Tensor{Name: c.name, DType: c.dtype, Shape: c.shape})
		require.Equal(t, c.want, got, c.name)
	}
}
