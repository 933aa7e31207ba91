package convert

import (
	"math"
	"testing"

	"github.com/stretchr/testify/require"
)

// Statistics of a tensor whose sums are small integers, worked by hand:
// w = [2, -2, 1, 3], gamma = 8/4 = 2, so mul = 1/2 and the scale is 2;
// w·mul = [1, -1, 0.5, 1.5] rounds (ties to even) to [1, -1, 0, 2] and
// clips to trits [1, -1, 0, 1]; ŵ = [2, -2, 0, 2].
// Σwŵ = 4 + 4 + 0 + 6 = 14, Σw² = 4 + 4 + 1 + 9 = 18, Σŵ² = 12,
// Σ(w−ŵ)² = 0 + 0 + 1 + 1 = 2, max |w−ŵ| = 1; one zero trit and one
// clipped (1.5 rounds to 2) of four.
func TestTernaryStatsWorkedByHand(t *testing.T) {
	want := Stats{
		ZeroFraction:    0.25,
		ClippedFraction: 0.25,
		RelRMSE:         math.Sqrt(2.0 / 18),
		MaxAbsErr:       1,
		Cosine:          14 / math.Sqrt(18*12), // 0.95257934...
	}
	require.InDelta(t, 0.9525793444156804, want.Cosine, 1e-15)
	for _, order := range []SumOrder{SumStrided16, SumSequential} {
		r := DefaultRecipe()
		r.Sum = order
		trits := make([]int8, 4)
		q, err := Ternarize([]float32{2, -2, 1, 3}, 4, PerTensor, r, trits)
		require.NoError(t, err)
		require.Equal(t, []int8{1, -1, 0, 1}, trits, order)
		require.Equal(t, []float32{2}, q.Scales, order)
		require.Equal(t, TritCounts{Neg: 1, Zero: 1, Pos: 2}, q.Counts, order)
		require.False(t, q.Exact, order)
		require.Equal(t, want, q.Stats, order)
	}
}

// Int8 codes round ties to even (pack/FORMAT.md): with max |row| = 127 the
// scale is 1, so 0.5, 2.5 and -1.5 are ties: they become 0, 2 and -2
// (half away from zero would give 1, 3 and -2). The statistics, worked by
// hand: ŵ = [127, 0, 2, -2]; w−ŵ = [0, 0.5, 0.5, 0.5]; Σw² = 16129 + 0.25
// + 6.25 + 2.25 = 16137.75, Σŵ² = 16129 + 0 + 4 + 4 = 16137, Σwŵ = 16129
// + 0 + 5 + 3 = 16137.
func TestInt8TiesToEvenWorkedByHand(t *testing.T) {
	w := []float32{127, 0.5, 2.5, -1.5}
	q := make([]int8, len(w))
	scales, stats, err := QuantizeInt8Rows(w, 4, q)
	require.NoError(t, err)
	require.Equal(t, []float32{1}, scales)
	require.Equal(t, []int8{127, 0, 2, -2}, q)
	require.Equal(t, Stats{
		ZeroFraction: 0.25,
		RelRMSE:      math.Sqrt(0.75 / 16137.75),
		MaxAbsErr:    0.5,
		Cosine:       16137 / math.Sqrt(16137.75*16137),
	}, stats)
}

// A converted copy's statistics, worked by hand: w = [1, 2], ŵ = [1, 3]:
// Σwŵ = 7, Σw² = 5, Σŵ² = 10, Σ(w−ŵ)² = 1.
func TestCompareFloat32WorkedByHand(t *testing.T) {
	require.Equal(t, Stats{
		RelRMSE:   math.Sqrt(1.0 / 5),
		MaxAbsErr: 1,
		Cosine:    7 / math.Sqrt(5*10),
	}, CompareFloat32([]float32{1, 2}, []float32{1, 3}))
}

// The strided sum's pairing matters only where float64 rounding does:
// these inputs make every other pairing give another gamma. With 16
// weights, partial sum p_k is |w_k|; float64 has 53 significant bits, so
// 2^53 + 1 is a tie that rounds to even, back to 2^53, while 2^53 + 2 is
// exact.
func TestStridedPairingWorkedByHand(t *testing.T) {
	cases := []struct {
		name  string
		set   map[int]float32
		total float64
	}{
		// t0 = 2^53, t1 = 1, t2 = 0, t3 = 1: (t0 + t2) + (t1 + t3) = 2^53 + 2;
		// (t0 + t1) + (t2 + t3) or (t0 + t3) + (t1 + t2) would give 2^53
		{"outer", map[int]float32{0: 0x1p53, 1: 1, 3: 1}, 0x1p53 + 2},
		// t0 = (p0 + p4) + (p8 + p12) with p0 = 2^53, p4 = 1, p12 = 1:
		// (2^53 + 1) + 1 = 2^53; (p0 + p8) + (p4 + p12) would give 2^53 + 2
		{"inner", map[int]float32{0: 0x1p53, 4: 1, 12: 1}, 0x1p53},
		// t0 = (p0 + p4) + (p8 + p12) with p4 = 2^53, p0 = p8 = 1:
		// (1 + 2^53) + 1 = 2^53; p0 + (p4 + p8) would too, but
		// (p0 + p8) + p4 gives 2^53 + 2
		{"inner left", map[int]float32{0: 1, 4: 0x1p53, 8: 1}, 0x1p53},
	}
	for _, c := range cases {
		w := make([]float32, 16)
		for i, v := range c.set {
			w[i] = v
		}
		for _, sign := range []float32{1, -1} { // |w| is summed
			x := make([]float32, 16)
			for i := range w {
				x[i] = sign * w[i]
			}
			got, err := Absmean(x, SumStrided16)
			require.NoError(t, err)
			require.Equal(t, c.total/16, got, "%s: sum %v", c.name, got*16)
		}
	}
}
