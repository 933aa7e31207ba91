package convert

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// The vector kernel gives the same block maxima as its portable twin, bit
// for bit, at every length 0..600 (so every tail), on random and special
// weights and scales.
func TestBoundKernelMatchesPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no vector kernels on this machine: the portable code is the only code")
	}
	rng := rand.New(rand.NewPCG(11, 12))
	scales := []float32{0.02, 1, math.SmallestNonzeroFloat32, math.MaxFloat32, 3e-39, float32(math.Inf(1))}
	for n := 0; n <= 600; n++ {
		for k, sc := range scales {
			w, trits := boundCase(rng, n, 0.02, k%2 == 1)
			c := newBoundConsts(sc)
			var out [boundChunk]float64
			got := blockMaxima(w, trits, &c, &out)
			want := make([]float64, (n+boundBlock-1)/boundBlock)
			blockMaximaGo(w, trits, &c, want)
			require.Len(t, got, len(want))
			for k := range want {
				require.Equal(t, math.Float64bits(want[k]), math.Float64bits(got[k]), "%d weights, scale %v, block %d: %v, want %v", n, sc, k, got[k], want[k])
			}
		}
	}
}

// Without the vector kernel (one pass, no blocks) the results are the same.
func TestTernaryBoundExcessMatchesScanPortable(t *testing.T) {
	defer func(v bool) { useAVX2 = v }(useAVX2)
	useAVX2 = false
	checkBoundMatchesScan(t)
}

// The bound check without the vector kernel, to compare with
// BenchmarkTernaryBoundExcess.
func BenchmarkTernaryBoundExcessPortable(b *testing.B) {
	defer func(v bool) { useAVX2 = v }(useAVX2)
	useAVX2 = false
	benchmarkBound(b, TernaryBoundExcess)
}
