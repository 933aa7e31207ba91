package convert

import (
	"encoding/binary"
	"math/rand/v2"
	"testing"
)

// Hot loops of packing, per element of a 1024 × 1024 weight matrix.
// Compare runs with benchstat; these report, they assert nothing.

func benchWeights(n int) []float32 {
	rng := rand.New(rand.NewPCG(1, 2))
	w := make([]float32, n)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * 0.02)
	}
	return w
}

func BenchmarkDecodeBF16(b *testing.B) {
	w := benchWeights(1 << 20)
	raw, _ := EncodeFloat32(nil, "BF16", w)
	dst := make([]float32, len(w))
	b.SetBytes(int64(len(raw)))
	for b.Loop() {
		if err := DecodeFloat32("BF16", raw, dst); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkDecodeF16(b *testing.B) {
	w := benchWeights(1 << 20)
	raw, _ := EncodeFloat32(nil, "F16", w)
	dst := make([]float32, len(w))
	b.SetBytes(int64(len(raw)))
	for b.Loop() {
		if err := DecodeFloat32("F16", raw, dst); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkAbsmean(b *testing.B) {
	w := benchWeights(1 << 20)
	b.SetBytes(int64(4 * len(w)))
	for b.Loop() {
		if _, err := Absmean(w, SumStrided16); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkTernarize(b *testing.B) {
	const rows, cols = 1024, 1024
	w := benchWeights(rows * cols)
	trits := make([]int8, len(w))
	for _, gs := range []string{"tensor", "row", "group:128"} {
		g, _ := ParseGranularity(gs)
		b.Run(gs, func(b *testing.B) {
			b.SetBytes(int64(4 * len(w)))
			for b.Loop() {
				if _, err := Ternarize(w, cols, g, DefaultRecipe(), trits); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

var sink uint32

func BenchmarkEncodeBF16Bits(b *testing.B) {
	w := benchWeights(1 << 20)
	raw := make([]byte, 2*len(w))
	b.SetBytes(int64(len(raw)))
	for b.Loop() {
		for i, f := range w {
			binary.LittleEndian.PutUint16(raw[2*i:], Float32ToBF16(f))
		}
		sink += uint32(raw[0])
	}
}

// The bound check of verify --against (the vector kernel where the
// machine has it), and the per-element scan it must agree with.
func BenchmarkTernaryBoundExcess(b *testing.B) { benchmarkBound(b, TernaryBoundExcess) }

func BenchmarkTernaryBoundExcessScan(b *testing.B) { benchmarkBound(b, ternaryBoundExcessScalar) }

func benchmarkBound(b *testing.B, bound func([]float32, []int8, []float32, int) (float64, int)) {
	w := benchWeights(1 << 20)
	trits := make([]int8, len(w))
	q, err := Ternarize(w, 1024, Granularity{Kind: GranRow}, DefaultRecipe(), trits)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(w)) * 4)
	for b.Loop() {
		bound(w, trits, q.Scales, 1024)
	}
}
