package verify

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// writeInPieces writes p to w in random pieces, empty ones included.
func writeInPieces(t *testing.T, rng *rand.Rand, w interface{ Write([]byte) (int, error) }, p []byte) {
	for len(p) > 0 {
		k := rng.IntN(min(len(p), 11) + 1)
		n, err := w.Write(p[:k])
		require.NoError(t, err)
		require.Equal(t, k, n)
		p = p[k:]
	}
}

// validScale is the rule on scales in floating point (pack/FORMAT.md):
// finite, and > 0 for ternary tensors, ≥ 0 for int8 ones.
func validScale(v float32, ternary bool) bool {
	f := float64(v)
	return !math.IsNaN(f) && !math.IsInf(f, 0) && v >= 0 && (v > 0 || !ternary)
}

// The scale checker tests bits; its verdict matches the floating-point
// rule on the special values of IEEE 754 binary32 and on random words, and
// names the first bad scale whatever the pieces it is written in.
func TestScaleChecker(t *testing.T) {
	// IEEE 754 binary32 bit patterns (the standard's layout: sign,
	// 8 exponent bits, 23 fraction bits)
	special := []struct {
		bits          uint32
		ternary, int8 bool
	}{
		{0x3f800000, true, true},   // 1.0
		{0x00000001, true, true},   // smallest subnormal
		{0x00800000, true, true},   // smallest normal
		{0x7f7fffff, true, true},   // largest finite
		{0x00000000, false, true},  // +0
		{0x80000000, false, true},  // -0, equal to 0
		{0xbf800000, false, false}, // -1.0
		{0x80000001, false, false}, // negative subnormal
		{0x7f800000, false, false}, // +Inf
		{0xff800000, false, false}, // -Inf
		{0x7fc00000, false, false}, // quiet NaN
		{0x7f800001, false, false}, // signalling NaN
		{0xffc00000, false, false}, // negative NaN
	}
	for _, c := range special {
		for _, ternary := range []bool{true, false} {
			want := c.int8
			if ternary {
				want = c.ternary
			}
			require.Equal(t, want, validScale(math.Float32frombits(c.bits), ternary), "reference on %#08x", c.bits)
			sc := &scaleChecker{ternary: ternary, bad: -1}
			sc.check(c.bits)
			require.Equal(t, want, sc.bad < 0, "%#08x ternary=%v", c.bits, ternary)
		}
	}

	rng := rand.New(rand.NewPCG(3, 4))
	for range 3000 {
		words := make([]uint32, rng.IntN(20))
		for i := range words {
			switch rng.IntN(4) {
			case 0:
				words[i] = special[rng.IntN(len(special))].bits
			default: // mostly valid positive values
				words[i] = rng.Uint32() & 0x7effffff
			}
		}
		p := make([]byte, 4*len(words))
		for i, w := range words {
			binary.LittleEndian.PutUint32(p[4*i:], w)
		}
		for _, ternary := range []bool{true, false} {
			wantBad := -1
			for i, w := range words {
				if !validScale(math.Float32frombits(w), ternary) {
					wantBad = i
					break
				}
			}
			sc := &scaleChecker{ternary: ternary, bad: -1}
			writeInPieces(t, rng, sc, p)
			require.Equal(t, wantBad, sc.bad)
			require.Equal(t, len(words), sc.n)
			if wantBad >= 0 {
				require.Equal(t, words[wantBad], math.Float32bits(sc.badValue))
			}
		}
	}
}

// The int8 checker names the first -128 whatever the pieces.
func TestInt8Checker(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for range 2000 {
		p := make([]byte, rng.IntN(50))
		for i := range p {
			p[i] = byte(rng.IntN(255)) // never 0xff … but 0x80 below
			if rng.IntN(30) == 0 {
				p[i] = 0x80
			}
		}
		c := &int8Checker{bad: -1}
		writeInPieces(t, rng, c, p)
		require.Equal(t, int64(bytes.IndexByte(p, 0x80)), c.bad)
		require.Equal(t, int64(len(p)), c.n)
	}
}
