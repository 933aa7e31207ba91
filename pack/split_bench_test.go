package pack

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"

	"ternkit/convert"
	"ternkit/manifest"
)

// BenchmarkTernaryWide ternarizes and encodes one wide BF16 tensor (the
// 8192 × 21824 shape of a large feed-forward projection, 357 MB) at tensor
// granularity under the default recipe, on 1 and 2 workers. Compare the
// two: go test ./pack -run - -bench TernaryWide -benchtime 3x
func BenchmarkTernaryWide(b *testing.B) {
	const rows, cols = 8192, 21824
	raw := make([]byte, 2*rows*cols)
	rng := rand.New(rand.NewPCG(61, 62))
	for i := 0; i < len(raw); i += 2 {
		v := math.Float32bits(float32(rng.NormFloat64()*0.02)) >> 16
		raw[i], raw[i+1] = byte(v), byte(v>>8)
	}
	for _, codec := range []Codec{Base3, Bits2} {
		for _, workers := range []int{1, 2} {
			b.Run(string(codec)+"/workers="+strconv.Itoa(workers), func(b *testing.B) {
				opts := Options{Codec: codec, Recipe: convert.DefaultRecipe(), Workers: workers, gate: convert.NewGate(workers)}
				a := convert.Action{Kind: convert.ActTernary, Granularity: convert.PerTensor}
				b.SetBytes(int64(len(raw)))
				for b.Loop() {
					var e manifest.Tensor
					opts.gate.Acquire() // as a tensor job holds one
					_, err := ternary(&e, a, convert.BF16Weights(raw), cols, opts)
					opts.gate.Release()
					if err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
