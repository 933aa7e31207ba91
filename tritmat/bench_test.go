package tritmat

import (
	"math/rand/v2"
	"testing"

	"ternkit/pack"
)

// The MLP shape of the benchmark checkpoint: 5632 × 2048.
const benchRows, benchCols = 5632, 2048

// BenchmarkMulInt8 multiplies a base3 matrix by one token's int8
// activations; SetBytes counts one byte per weight, so MB/s reads as
// million weights per second.
func BenchmarkMulInt8(b *testing.B) {
	for _, codec := range []string{Bits2, Base3} {
		for _, ntok := range []int{1, 64} {
			b.Run(codec+"/tokens="+itoa(ntok), func(b *testing.B) {
				rng := rand.New(rand.NewPCG(5, 6))
				trits := randomTrits(rng, benchRows*benchCols)
				m := Matrix{Codec: codec, Data: pack.Codec(codec).Encode(nil, trits), Rows: benchRows, Cols: benchCols}
				x := randomInt8(rng, ntok*benchCols)
				dst := make([]int32, ntok*benchRows)
				b.SetBytes(int64(benchRows * benchCols * ntok))
				for b.Loop() {
					if err := MulInt8(dst, m, 0, x, ntok); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}

// BenchmarkFloat32Peer is the peer: a plain float32 matrix-vector product
// of the same shape, row by row.
func BenchmarkFloat32Peer(b *testing.B) {
	rng := rand.New(rand.NewPCG(7, 8))
	w := make([]float32, benchRows*benchCols)
	for i := range w {
		w[i] = float32(rng.NormFloat64())
	}
	x := make([]float32, benchCols)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	y := make([]float32, benchRows)
	b.SetBytes(benchRows * benchCols)
	for b.Loop() {
		for r := range benchRows {
			row := w[r*benchCols : (r+1)*benchCols]
			var s0, s1, s2, s3 float32
			for c := 0; c+4 <= len(row); c += 4 {
				s0 += row[c] * x[c]
				s1 += row[c+1] * x[c+1]
				s2 += row[c+2] * x[c+2]
				s3 += row[c+3] * x[c+3]
			}
			y[r] = s0 + s1 + s2 + s3
		}
	}
}

// BenchmarkDot is the inner product alone, vector and portable.
func BenchmarkDot(b *testing.B) {
	rng := rand.New(rand.NewPCG(9, 10))
	a, x := randomInt8(rng, benchCols), randomInt8(rng, benchCols)
	b.Run("vector", func(b *testing.B) {
		b.SetBytes(benchCols)
		for b.Loop() {
			Dot(a, x)
		}
	})
	b.Run("portable", func(b *testing.B) {
		b.SetBytes(benchCols)
		for b.Loop() {
			DotPortable(a, x)
		}
	})
}

func itoa(n int) string {
	if n < 10 {
		return string(rune('0' + n))
	}
	return itoa(n/10) + string(rune('0'+n%10))
}
