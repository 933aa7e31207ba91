package probe

import (
	"math"
	"math/rand/v2"
	"testing"

	"ternkit/internal/asmcheck"
)

// dotPortable is dotF32 with the portable bulk: the definition.
func dotPortable(a, b []float32) float32 {
	var s [dotLanes]float32
	n := dotBulkPortable(a, b, &s)
	for i := n; i < len(a); i++ {
		s[i%dotLanes] += float32(a[i] * b[i])
	}
	for w := dotLanes / 2; w >= 1; w /= 2 {
		for k := range w {
			s[k] += s[k+w]
		}
	}
	return s[0]
}

// TestDotF32MatchesPortable holds the vector float product to its twin
// bit for bit, every length 0..600, with special values.
func TestDotF32MatchesPortable(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for n := range 601 {
		a, b := make([]float32, n), make([]float32, n)
		for i := range a {
			a[i], b[i] = float32(rng.NormFloat64()*1e3), float32(rng.NormFloat64())
		}
		if n > 40 {
			a[3], b[7], a[33] = float32(math.Inf(1)), float32(math.NaN()), 3e38
		}
		got, want := dotF32(a, b), dotPortable(a, b)
		if math.Float32bits(got) != math.Float32bits(want) && !(got != got && want != want) {
			t.Fatalf("length %d: %v, portable %v", n, got, want)
		}
	}
	// two vectors sharing the weights: the same bits as one at a time
	for n := range 601 {
		w, x0, x1 := make([]float32, n), make([]float32, n), make([]float32, n)
		for i := range w {
			w[i], x0[i], x1[i] = float32(rng.NormFloat64()), float32(rng.NormFloat64()*1e3), float32(rng.NormFloat64())
		}
		g0, g1 := dot2F32(w, x0, x1)
		if w0, w1 := dotPortable(w, x0), dotPortable(w, x1); math.Float32bits(g0) != math.Float32bits(w0) || math.Float32bits(g1) != math.Float32bits(w1) {
			t.Fatalf("length %d: two at once %v %v, portable %v %v", n, g0, g1, w0, w1)
		}
	}
	// the sum itself, against float64
	a := []float32{1, 2, 3, 4, 5}
	if got := dotF32(a, a); got != 55 {
		t.Errorf("1..5 squared: %v, want 55", got)
	}
}

func TestNoLegacySSEMoves(t *testing.T) {
	found, err := asmcheck.LegacySSEMoves(".")
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range found {
		t.Errorf("legacy SSE move in AVX code: %s", f)
	}
}

func BenchmarkDotF32(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	x, y := make([]float32, 2048), make([]float32, 2048)
	for i := range x {
		x[i], y[i] = float32(rng.NormFloat64()), float32(rng.NormFloat64())
	}
	b.Run("vector", func(b *testing.B) {
		b.SetBytes(2048)
		for b.Loop() {
			dotF32(x, y)
		}
	})
	b.Run("portable", func(b *testing.B) {
		b.SetBytes(2048)
		for b.Loop() {
			dotPortable(x, y)
		}
	})
}

// BenchmarkFloatLinear is the source's product: a 5632 × 2048 float32
// matrix times 64 tokens, the rows copied in as a decoder would give them.
func BenchmarkFloatLinear(b *testing.B) {
	const rows, cols, ntok = 5632, 2048, 64
	rng := rand.New(rand.NewPCG(2, 2))
	w := make([]float32, rows*cols)
	for i := range w {
		w[i] = float32(rng.NormFloat64())
	}
	x := make([]float32, ntok*cols)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	b.SetBytes(rows * cols * ntok)
	for b.Loop() {
		if _, err := floatLinear(rows, cols, func(r0, r1 int, dst []float32) error {
			copy(dst, w[r0*cols:r1*cols])
			return nil
		}, x, ntok); err != nil {
			b.Fatal(err)
		}
	}
}
