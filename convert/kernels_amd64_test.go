package convert

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// Ternarize gives the same trits, scales and statistics (bit for bit, as
// verify compares them) with and without the vector kernels, so an
// artifact packed on one machine verifies on another.
func TestTernarizeSameWithoutVectorKernels(t *testing.T) {
	if !useAVX2 {
		t.Skip("no vector kernels on this machine")
	}
	rng := rand.New(rand.NewPCG(3, 4))
	for _, shape := range [][2]int{{1, 1}, {3, 7}, {16, 33}, {64, 1000}, {7, 1536}} {
		w := kernelWeights(rng, shape[0]*shape[1], 0.01)
		raw, _ := bf16Of(w)
		for _, g := range []Granularity{PerTensor, {Kind: GranRow}} {
			for _, r := range []Recipe{DefaultRecipe(), recipeWith(ScaleQuotient, TieHalfAway)} {
				run := func(vector bool) ([]int8, Ternary, []float32) {
					defer func(v bool) { useAVX2 = v }(useAVX2)
					useAVX2 = vector
					f := make([]float32, len(w))
					decodeBF16(f, raw)
					trits := make([]int8, len(w))
					q, err := Ternarize(f, shape[1], g, r, trits)
					require.NoError(t, err)
					inPlace := make([]int8, len(w))
					qb, err := ternarizeBF16(raw, shape[1], g, r, inPlace)
					require.NoError(t, err)
					require.Equal(t, trits, inPlace, "%v %v %+v trits from BF16 in place", shape, g, r)
					require.Equal(t, q, qb, "%v %v %+v result from BF16 in place", shape, g, r)
					return trits, q, f
				}
				t1, q1, f1 := run(true)
				t2, q2, f2 := run(false)
				require.Equal(t, f2, f1, "%v %v %+v decode", shape, g, r)
				require.Equal(t, t2, t1, "%v %v %+v trits", shape, g, r)
				require.Equal(t, q2, q1, "%v %v %+v result", shape, g, r)
			}
		}
	}
}
