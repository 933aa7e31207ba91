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
			raw, widened := bf16Of(w)
			c := newBoundConsts(sc)
			for _, in := range []struct {
				name    string
				w, f32s weights
			}{{"float32", weights{f32: w}, weights{f32: w}}, {"bf16", weights{bf16: raw}, weights{f32: widened}}} {
				var out, viaF32 [boundChunk]float64
				got := blockMaxima(in.w, trits, &c, &out)
				want := make([]float64, (n+boundBlock-1)/boundBlock)
				blockMaximaGo(in.w, trits, &c, want)
				same := blockMaxima(in.f32s, trits, &c, &viaF32)
				require.Len(t, got, len(want))
				for k := range want {
					require.Equal(t, math.Float64bits(want[k]), math.Float64bits(got[k]), "%d %s weights, scale %v, block %d: %v, want %v", n, in.name, sc, k, got[k], want[k])
					require.Equal(t, math.Float64bits(same[k]), math.Float64bits(got[k]), "%d %s weights and their float32 values, scale %v, block %d", n, in.name, sc, k)
				}
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
