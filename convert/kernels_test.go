package convert

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// kernelWeights returns n weights mixing Gaussian values with the values at
// which the kernels could go wrong: ±0, exact ties of the thresholds after
// scaling, subnormals and the largest finite float32.
func kernelWeights(rng *rand.Rand, n int, gamma float32) []float32 {
	special := []float32{0, float32(math.Copysign(0, -1)), gamma / 2, -gamma / 2, 1.5 * gamma, -1.5 * gamma,
		gamma, -gamma, math.SmallestNonzeroFloat32, -math.SmallestNonzeroFloat32, math.MaxFloat32, -math.MaxFloat32,
		math.Nextafter32(gamma/2, 0), math.Nextafter32(gamma/2, 1)}
	w := make([]float32, n)
	for i := range w {
		if rng.IntN(4) == 0 {
			w[i] = special[rng.IntN(len(special))]
		} else {
			w[i] = float32(rng.NormFloat64()) * gamma * 1.25
		}
	}
	return w
}

// bf16Of is w as little-endian BF16 (the top half of each float32) and
// those BF16 values widened back to float32.
func bf16Of(w []float32) (raw []byte, widened []float32) {
	raw = make([]byte, 2*len(w))
	for i, v := range w {
		b := math.Float32bits(v) >> 16
		raw[2*i], raw[2*i+1] = byte(b), byte(b>>8)
	}
	widened = make([]float32, len(w))
	decodeBF16Go(widened, raw)
	return raw, widened
}

// The vector kernels give the same bits as their portable twins, for every
// length (so every tail) and both scale rules and tie rules.
func TestKernelsMatchPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no vector kernels on this machine: the portable code is the only code")
	}
	rng := rand.New(rand.NewPCG(7, 8))
	for n := 0; n <= 600; n += 1 + n/40 {
		w := kernelWeights(rng, n, 0.02)

		// the same weights as BF16, read in place
		half, widened := bf16Of(w)
		for _, in := range []struct {
			name string
			w    weights
			f32  weights
		}{{"float32", weights{f32: w}, weights{f32: w}}, {"bf16", weights{bf16: half}, weights{f32: widened}}} {
			var s1, q1, s2, q2, s3, q3 [16]float64
			absLanes16(in.w, &s1, &q1)
			absLanes16Go(in.w, &s2, &q2)
			absLanes16(in.f32, &s3, &q3)
			require.Equal(t, s2, s1, "absolute sums, %d %s weights", n, in.name)
			require.Equal(t, q2, q1, "squares, %d %s weights", n, in.name)
			require.Equal(t, s3, s1, "absolute sums, %d %s weights and their float32 values", n, in.name)
			require.Equal(t, q3, q1, "squares, %d %s weights and their float32 values", n, in.name)

			for _, r := range []Recipe{recipeWith(ScaleReciprocal, TieHalfEven), recipeWith(ScaleQuotient, TieHalfAway),
				recipeWith(ScaleReciprocal, TieHalfAway), recipeWith(ScaleQuotient, TieHalfEven)} {
				q := newQuantizer(r, 0.02)
				got, want, viaF32 := make([]int8, n), make([]int8, n), make([]int8, n)
				var lg, lw, lf laneTotals
				quantizeBlock(in.w, got, q, &lg)
				quantizeBlockGo(in.w, want, q, &lw)
				quantizeBlock(in.f32, viaF32, q, &lf)
				require.Equal(t, want, got, "trits, %d %s weights, %+v", n, in.name, r)
				require.Equal(t, lw, lg, "lane totals, %d %s weights, %+v", n, in.name, r)
				require.Equal(t, viaF32, got, "trits, %d %s weights and their float32 values, %+v", n, in.name, r)
				require.Equal(t, lf, lg, "lane totals, %d %s weights and their float32 values, %+v", n, in.name, r)
			}
		}

		raw := make([]byte, 2*n)
		for i := range raw {
			raw[i] = byte(rng.Uint32())
		}
		f1, f2 := make([]float32, n), make([]float32, n)
		nf1, nf2 := decodeBF16(f1, raw), decodeBF16Go(f2, raw)
		require.Equal(t, nf2, nf1, "non-finite, %d values", n)
		for i := range f1 {
			require.Equal(t, math.Float32bits(f2[i]), math.Float32bits(f1[i]), "value %d of %d", i, n)
		}
	}
}

// A NaN or ±Inf at any position of any length is reported by the BF16
// decode, and only then. IEEE 754 bfloat16 (common practice: the top half
// of binary32): 0x7f80 is +Inf, 0xff80 is −Inf, 0x7fc0 a quiet NaN, 0x7f81
// a signalling NaN; 0x7f7f is the largest finite value.
func TestDecodeBF16NonFiniteAtEveryPosition(t *testing.T) {
	for n := 1; n <= 40; n++ {
		raw := make([]byte, 2*n)
		for i := 0; i < n; i++ {
			raw[2*i], raw[2*i+1] = 0x7f, 0x7f // largest finite
		}
		dst := make([]float32, n)
		require.False(t, decodeBF16(dst, raw), "%d finite values", n)
		for i := 0; i < n; i++ {
			for _, bad := range []uint16{0x7f80, 0xff80, 0x7fc0, 0x7f81} {
				raw[2*i], raw[2*i+1] = byte(bad), byte(bad>>8)
				require.True(t, decodeBF16(dst, raw), "0x%04x at %d of %d", bad, i, n)
				raw[2*i], raw[2*i+1] = 0x7f, 0x7f
			}
		}
	}
}

// combineLanes16 adds in the documented order: with partial sums that are
// powers of two far apart, a different order rounds differently.
func TestCombineLanes16Order(t *testing.T) {
	var p [16]float64
	p[0], p[4], p[2] = 1, 0x1p53, -0x1p53
	// t0 = (1 + 2^53) + 0 = 2^53 (1 is lost), t2 = −2^53: the sum is 0;
	// adding p0 after p4 and p2 would give 1
	require.Equal(t, 0.0, combineLanes16(&p))
	p = [16]float64{}
	p[0], p[2], p[4] = 1, 0x1p53, -0x1p53
	// t0 = (1 − 2^53) = −2^53+1 exactly, t2 = 2^53: the sum is 1
	require.Equal(t, 1.0, combineLanes16(&p))
}

// The sum order is part of the recipe because it changes gamma: one large
// weight followed by many ones loses every one in a sequential float64 sum
// (2^60 + 1 rounds back to 2^60), while the strided partial sums gather the
// ones first (Goldberg 1991, "What every computer scientist should know
// about floating-point arithmetic": addition is not associative).
func TestSumOrderChangesGamma(t *testing.T) {
	w := make([]float32, 1024)
	w[0] = 0x1p60
	for i := 1; i < len(w); i++ {
		if i%16 != 0 {
			w[i] = 1
		}
	}
	seq, err := Absmean(w, SumSequential)
	require.NoError(t, err)
	str, err := Absmean(w, SumStrided16)
	require.NoError(t, err)
	require.Equal(t, 0x1p60/1024, seq)
	// lanes 1..15 hold 64 ones each; t0 = (2^60 + 64) + 128 = 2^60 (the
	// float64 spacing at 2^60 is 256, and 2^60 + 128 is a tie to even),
	// t1 = t2 = t3 = 256: (t0 + t2) + (t1 + t3) = 2^60 + 768, exactly
	require.Equal(t, (0x1p60+768)/1024, str)
}

// ternarizeBF16 collects the trits TernarizeStream hands over for BF16
// weights read in place.
func ternarizeBF16(raw []byte, cols int, g Granularity, r Recipe, trits []int8) (Ternary, error) {
	got := trits[:0]
	res, err := TernarizeStream(BF16Weights(raw), cols, g, r, func(t []int8) error {
		got = append(got, t...)
		return nil
	})
	if err == nil && len(got) != len(trits) {
		err = fmt.Errorf("%d trits for %d weights", len(got), len(trits))
	}
	return res, err
}

// BF16 weights read in place give what Ternarize gives over their float32
// values, for every sum order, granularity and an exact
// tensor; a NaN is reported at its index.
func TestTernarizeBF16MatchesFloat32(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	exact := make([]float32, 8*40)
	for i := range exact {
		exact[i] = float32(rng.IntN(3)-1) * 0.25
	}
	for _, w := range [][]float32{kernelWeights(rng, 8*40, 0.05), exact, {}} {
		raw, f := bf16Of(w)
		for _, gs := range []string{"tensor", "row", "group:8"} {
			g, err := ParseGranularity(gs)
			require.NoError(t, err)
			if _, err := g.GroupSize(len(w), 40); err != nil {
				continue
			}
			for _, order := range []SumOrder{SumStrided16, SumSequential} {
				r := DefaultRecipe()
				r.Sum = order
				want, got := make([]int8, len(w)), make([]int8, len(w))
				qw, err := Ternarize(f, 40, g, r, want)
				require.NoError(t, err)
				qg, err := ternarizeBF16(raw, 40, g, r, got)
				require.NoError(t, err)
				require.Equal(t, want, got, "%d weights %s %s", len(w), gs, order)
				require.Equal(t, qw, qg, "%d weights %s %s", len(w), gs, order)
			}
		}
	}
	w := kernelWeights(rng, 100, 0.05)
	raw, _ := bf16Of(w)
	raw[2*37], raw[2*37+1] = 0xc0, 0x7f // a quiet NaN (IEEE 754 bfloat16, common practice)
	_, err := ternarizeBF16(raw, 10, PerTensor, DefaultRecipe(), make([]int8, 100))
	var nf *NonFiniteError
	require.ErrorAs(t, err, &nf)
	require.Equal(t, 37, nf.Index)
}

// Inputs longer than one kernel call (kernelRun) give the portable bits
// too: the runs keep every weight in its lane.
func TestKernelsAcrossRuns(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	n := 3*kernelRun + 37
	w := kernelWeights(rng, n, 0.3)
	half, _ := bf16Of(w)
	for _, in := range []weights{{f32: w}, {bf16: half}} {
		var s1, q1, s2, q2 [16]float64
		absLanes16(in, &s1, &q1)
		absLanes16Go(in, &s2, &q2)
		require.Equal(t, s2, s1)
		require.Equal(t, q2, q1)
	}
	f1, f2 := make([]float32, n), make([]float32, n)
	half[2*(2*kernelRun+5)+1] = 0x7f // exponent bits all set in the third run: NaN or Inf
	half[2*(2*kernelRun+5)] |= 0x80
	require.True(t, decodeBF16(f1, half))
	require.True(t, decodeBF16Go(f2, half))
	require.Equal(t, f2[:2*kernelRun], f1[:2*kernelRun])
}

// TernarizeStream hands over, in order, exactly the trits Ternarize
// stores, with the same result, for float32 and BF16 weights, every
// granularity and both sum orders; an error from emit stops it.
func TestTernarizeStream(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	const rows, cols = 9, 1030 // rows longer than a block, not a multiple of it
	w := kernelWeights(rng, rows*cols, 0.02)
	raw, widened := bf16Of(w)
	for _, in := range []struct {
		w   Weights
		f32 []float32
	}{{Float32Weights(w), w}, {BF16Weights(raw), widened}} {
		for _, gs := range []string{"tensor", "row", "group:10"} {
			g, err := ParseGranularity(gs)
			require.NoError(t, err)
			for _, order := range []SumOrder{SumStrided16, SumSequential} {
				r := DefaultRecipe()
				r.Sum = order
				want := make([]int8, len(w))
				qw, err := Ternarize(in.f32, cols, g, r, want)
				require.NoError(t, err)
				var got []int8
				calls := 0
				qg, err := TernarizeStream(in.w, cols, g, r, func(tr []int8) error {
					got = append(got, tr...)
					calls++
					return nil
				})
				require.NoError(t, err)
				require.Equal(t, want, got, "%s %s", gs, order)
				require.Equal(t, qw, qg, "%s %s", gs, order)
				require.Greater(t, calls, rows, "%s %s: trits come in runs", gs, order)
			}
		}
		stop := errors.New("disk full")
		calls := 0
		_, err := TernarizeStream(in.w, cols, PerTensor, DefaultRecipe(), func([]int8) error {
			calls++
			if calls == 3 {
				return stop
			}
			return nil
		})
		require.ErrorIs(t, err, stop)
		require.Equal(t, 3, calls)
	}
}
