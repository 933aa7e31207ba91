package convert

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// ternaryBoundExcessScalar is the per-element scan TernaryBoundExcess must
// agree with: every element in index order, in float64, the first index
// attaining the largest excess kept.
func ternaryBoundExcessScalar(w []float32, trits []int8, scales []float32, groupSize int) (float64, int) {
	var worst excessTracker
	for g, sc := range scales {
		s := float64(sc)
		best, at := math.Inf(-1), -1
		for i := g * groupSize; i < min((g+1)*groupSize, len(w)); i++ {
			a := math.Abs(float64(w[i]))
			d := math.Abs(float64(w[i]) - float64(sc*float32(trits[i])))
			beyond := float64(b2i(a > 1.5*s))
			e := float64((d-s/2)*(1-beyond)) + float64(math.Abs(d-(a-s))*beyond)
			if e > best {
				best, at = e, i
			}
		}
		worst.note(best, at, s)
	}
	return worst.result()
}

// boundCase returns n weights (Gaussian and the special values of
// kernelWeights, with NaN and ±Inf mixed in when nonFinite), trits that
// are mostly right, sometimes wrong and sometimes outside {−1, 0, 1}.
func boundCase(rng *rand.Rand, n int, gamma float32, nonFinite bool) ([]float32, []int8) {
	w := kernelWeights(rng, n, gamma)
	trits := make([]int8, n)
	for i, v := range w {
		switch {
		case v > gamma/2:
			trits[i] = 1
		case v < -gamma/2:
			trits[i] = -1
		}
		switch rng.IntN(16) {
		case 0:
			trits[i] = int8(rng.IntN(3) - 1)
		case 1:
			trits[i] = int8(rng.Uint32())
		}
		if nonFinite && rng.IntN(8) == 0 {
			w[i] = []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))}[rng.IntN(3)]
		}
	}
	return w, trits
}

// TernaryBoundExcess returns exactly what the plain per-element scan does:
// the same excess, bit for bit, and the same index, whatever the groups,
// including ties, NaN and ±Inf. (bound_amd64_test.go runs it once more
// without the vector kernel.)
func TestTernaryBoundExcessMatchesScan(t *testing.T) {
	checkBoundMatchesScan(t)
}

func checkBoundMatchesScan(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	type shape struct{ n, group int }
	shapes := []shape{{0, 1}, {1, 1}, {7, 7}, {9, 3}, {600, 600}, {600, 37}, {1000, 1000}, {4096, 512},
		{3000, 2999}, {boundChunk * boundBlock, boundChunk * boundBlock}, {5000, 5000}}
	for _, sh := range shapes {
		for _, nonFinite := range []bool{false, true} {
			w, trits := boundCase(rng, sh.n, 0.02, nonFinite)
			groups := (sh.n + sh.group - 1) / sh.group
			scales := make([]float32, groups)
			for g := range scales {
				scales[g] = float32(0.02 * (0.5 + rng.Float64()))
			}
			want, wantAt := ternaryBoundExcessScalar(w, trits, scales, sh.group)
			got, at := TernaryBoundExcess(w, trits, scales, sh.group)
			require.Equal(t, math.Float64bits(want), math.Float64bits(got), "%+v non-finite %v: %v, want %v", sh, nonFinite, got, want)
			require.Equal(t, wantAt, at, "%+v non-finite %v", sh, nonFinite)
			// BF16 weights read in place, against the scan of their values
			raw, widened := bf16Of(w)
			want, wantAt = ternaryBoundExcessScalar(widened, trits, scales, sh.group)
			got, at = TernaryBoundExcessOf(BF16Weights(raw), trits, scales, sh.group)
			require.Equal(t, math.Float64bits(want), math.Float64bits(got), "%+v BF16 non-finite %v: %v, want %v", sh, nonFinite, got, want)
			require.Equal(t, wantAt, at, "%+v BF16 non-finite %v", sh, nonFinite)
		}
	}
}

// A single wrong trit is found wherever it lies: in any lane of the vector
// kernel, in a tail, in any block; of two equal breaches the first is named.
func TestTernaryBoundExcessFindsEveryPosition(t *testing.T) {
	const n = 3*boundBlock + 5
	w := make([]float32, n)
	trits := make([]int8, n) // all weights 0, all trits 0: every excess is −s/2
	scales := []float32{0.5}
	for i := range n {
		trits[i] = 1 // |0 − 0.5| − 0.25 = 0.25, relative 0.5
		excess, at := TernaryBoundExcess(w, trits, scales, n)
		require.Equal(t, 0.5, excess, "wrong trit at %d", i)
		require.Equal(t, i, at, "wrong trit at %d", i)
		trits[n-1-i%boundBlock] = -1 // an equal breach later on changes nothing
		excess, at = TernaryBoundExcess(w, trits, scales, n)
		if n-1-i%boundBlock > i {
			require.Equal(t, 0.5, excess)
			require.Equal(t, i, at, "first of two breaches, at %d and %d", i, n-1-i%boundBlock)
		}
		trits[i], trits[n-1-i%boundBlock] = 0, 0
	}
	excess, at := TernaryBoundExcess(w, trits, scales, n)
	require.Equal(t, -0.5, excess) // every element within its bound by s/2
	require.Equal(t, 0, at)
}
