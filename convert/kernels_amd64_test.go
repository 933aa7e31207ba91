package convert

import (
	"encoding/binary"
	"math"
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

// Any float32 bits (NaN, ±Inf, subnormals included), at any length, give
// the vector kernels the portable twins' results, bit for bit.
func FuzzKernelsMatchPortable(f *testing.F) {
	f.Add([]byte{0, 0, 0x80, 0x3f, 0, 0, 0xc0, 0x7f, 1, 0, 0, 0}, float32(0.02))
	f.Fuzz(func(t *testing.T, data []byte, gamma float32) {
		if !useAVX2 {
			t.Skip("no vector kernels on this machine")
		}
		w := make([]float32, len(data)/4)
		for i := range w {
			w[i] = math.Float32frombits(binary.LittleEndian.Uint32(data[4*i:]))
		}
		raw, _ := bf16Of(w)
		for _, in := range []weights{{f32: w}, {bf16: raw}} {
			var s1, q1, s2, q2 [16]float64
			absLanes16(in, &s1, &q1)
			absLanes16Go(in, &s2, &q2)
			requireSameBits(t, s2[:], s1[:])
			requireSameBits(t, q2[:], q1[:])
			n := min(in.len(), laneBlock)
			for _, r := range []Recipe{recipeWith(ScaleReciprocal, TieHalfEven), recipeWith(ScaleQuotient, TieHalfAway)} {
				q := newQuantizer(r, float64(gamma))
				got, want := make([]int8, n), make([]int8, n)
				var lg, lw laneTotals
				quantizeBlock(in.slice(0, n), got, q, &lg)
				quantizeBlockGo(in.slice(0, n), want, q, &lw)
				require.Equal(t, want, got)
				requireSameBits(t, f64s(lw.abs[:]), f64s(lg.abs[:]))
				requireSameBits(t, f64s(lw.maxErr[:]), f64s(lg.maxErr[:]))
				require.Equal(t, [3][8]int32{lw.nonzero, lw.tritSum, lw.clipped}, [3][8]int32{lg.nonzero, lg.tritSum, lg.clipped})
			}
		}
		f1, f2 := make([]float32, len(w)), make([]float32, len(w))
		require.Equal(t, decodeBF16Go(f2, raw), decodeBF16(f1, raw))
		requireSameBits(t, f64s(f2), f64s(f1))
	})
}

// requireSameBits compares float64 values bit for bit (NaN equal to the
// same NaN).
func requireSameBits(t *testing.T, want, got []float64) {
	t.Helper()
	require.Len(t, got, len(want))
	for i := range want {
		require.Equal(t, math.Float64bits(want[i]), math.Float64bits(got[i]), "value %d: %v, want %v", i, got[i], want[i])
	}
}

// f64s widens float32 values exactly, keeping NaN payloads apart.
func f64s(v []float32) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = math.Float64frombits(uint64(math.Float32bits(x)))
	}
	return out
}
