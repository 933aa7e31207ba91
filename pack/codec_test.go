package pack

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/manifest"
)

func randomTrits(rng *rand.Rand, n int) []int8 {
	t := make([]int8, n)
	for i := range t {
		t[i] = int8(rng.IntN(3)) - 1
	}
	return t
}

func TestCodecRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	for _, c := range Codecs {
		for n := 0; n <= 200; n++ { // past the 32- and 40-trit steps of the decoders
			trits := randomTrits(rng, n)
			p := c.Encode(nil, trits)
			lo, hi, ok := manifest.TritPayloadRange(string(c), int64(n))
			require.True(t, ok)
			require.True(t, int64(len(p)) >= lo && int64(len(p)) <= hi, "%s n=%d: %d bytes", c, n, len(p))
			got := make([]int8, n)
			require.NoError(t, c.Decode(got, p), "%s n=%d", c, n)
			require.Equal(t, trits, got, "%s n=%d", c, n)
		}
	}
}

// Worked bytes from pack/FORMAT.md: codes 0→0, +1→1, −1→2, trit i at the
// least significant digit first.
func TestCodecWorkedBytes(t *testing.T) {
	trits := []int8{1, -1, 0, 1, -1}
	// bits2: 1 | 2<<2 | 0<<4 | 1<<6 = 0x49; then 2 = 0x02
	require.Equal(t, []byte{0x49, 0x02}, Bits2.Encode(nil, trits))
	// base3: 1 + 2·3 + 0·9 + 1·27 + 2·81 = 196
	require.Equal(t, []byte{196}, Base3.Encode(nil, trits))
}

// Exhaustive over single bytes: a byte decodes iff an encoder could have
// written it, and re-encoding gives the byte back.
func TestCodecEveryByte(t *testing.T) {
	for b := 0; b < 256; b++ {
		p := []byte{byte(b)}
		four := make([]int8, 4)
		err := Bits2.Decode(four, p)
		hasCode3 := false
		for k := 0; k < 4; k++ {
			hasCode3 = hasCode3 || (b>>(2*k))&3 == 3
		}
		if hasCode3 {
			require.ErrorIs(t, err, ErrInvalidCode, "bits2 0x%02x", b)
		} else {
			require.NoError(t, err, "bits2 0x%02x", b)
			require.Equal(t, p, Bits2.Encode(nil, four))
		}
		five := make([]int8, 5)
		err = Base3.Decode(five, p)
		if b >= 243 { // 3^5 = 243 ≤ 256: values 243..255 are unused
			require.ErrorIs(t, err, ErrInvalidCode, "base3 %d", b)
		} else {
			require.NoError(t, err, "base3 %d", b)
			require.Equal(t, p, Base3.Encode(nil, five))
		}
	}
}

// An invalid byte anywhere in a long payload is found and named, whether it
// falls in a decoder's multi-byte step or in the tail.
func TestCodecNamesInvalidByte(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	cases := []struct {
		codec Codec
		bad   byte
	}{{Bits2, 0x30}, {Base3, 250}} // 0x30: code 3 in pair 2; 250 > 242
	for _, c := range cases {
		const n = 203
		good := c.codec.Encode(nil, randomTrits(rng, n))
		for j := 0; j < len(good)-1; j++ { // the last byte is the padding case
			p := bytes.Clone(good)
			p[j] = c.bad
			err := c.codec.Decode(make([]int8, n), p)
			require.ErrorIs(t, err, ErrInvalidCode, "%s byte %d", c.codec, j)
			require.Contains(t, err.Error(), fmt.Sprintf("byte %d is ", j), "%s", c.codec)
		}
	}
}

func TestCodecRejectsPaddingAndLength(t *testing.T) {
	cases := []struct {
		name    string
		codec   Codec
		n       int
		payload []byte
	}{
		{"bits2 padding pair", Bits2, 3, []byte{0x40}},
		{"bits2 short", Bits2, 5, []byte{0}},
		{"bits2 long", Bits2, 4, []byte{0, 0}},
		{"base3 padding digit", Base3, 2, []byte{9}}, // 2 trits: value must be < 9
		{"base3 short", Base3, 6, []byte{0}},
		{"base3 long", Base3, 5, []byte{0, 0}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := c.codec.Decode(make([]int8, c.n), c.payload)
			require.ErrorIs(t, err, ErrInvalidCode)
		})
	}
}

// Size bounds from facts of the trade: log2(3) = 1.585 bits is the least a
// uniform trit can take; 5 trits in a byte (3^5 = 243 ≤ 256) is 1.6 bits.
func TestCodecBitsPerTrit(t *testing.T) {
	const n = 1 << 20
	cases := []struct {
		codec Codec
		bits  float64
	}{{Bits2, 2}, {Base3, 1.6}}
	for _, c := range cases {
		bpt := 8 * float64(c.codec.EncodedLen(n)) / n
		require.InDelta(t, c.bits, bpt, 1e-5, string(c.codec))
		require.GreaterOrEqual(t, bpt, math.Log2(3))
	}
	require.LessOrEqual(t, 8*float64(Base3.EncodedLen(n))/n, 1.601)
}

func TestParseCodec(t *testing.T) {
	c, err := ParseCodec("base3")
	require.NoError(t, err)
	require.Equal(t, Base3, c)
	_, err = ParseCodec("base4")
	require.ErrorIs(t, err, ErrCodec)
	require.Contains(t, err.Error(), `"base4"`)
	require.Contains(t, err.Error(), "bits2, base3, entropy, auto")
	c, err = ParseCodec("auto")
	require.NoError(t, err)
	require.Equal(t, Auto, c)
}

func FuzzCodecDecode(f *testing.F) {
	f.Add([]byte{0x49, 0x02}, uint16(5), uint8(0))
	f.Add([]byte{196}, uint16(5), uint8(1))
	f.Add([]byte{0xff, 0xff}, uint16(8), uint8(0))
	f.Add([]byte{243}, uint16(5), uint8(1))
	f.Add(Entropy.Encode(nil, []int8{1, -1, 0, 1, -1, 0, 0}), uint16(7), uint8(2))
	f.Add(Entropy.Encode(nil, sparseTrits(1, 3000, 0.6)), uint16(3000), uint8(2))
	f.Fuzz(func(t *testing.T, payload []byte, n uint16, codec uint8) {
		c := Codecs[int(codec)%len(Codecs)]
		dst := make([]int8, n)
		if err := c.Decode(dst, payload); err != nil {
			if !errors.Is(err, ErrInvalidCode) {
				t.Fatalf("error does not wrap ErrInvalidCode: %v", err)
			}
			return
		}
		for _, v := range dst {
			if v < -1 || v > 1 {
				t.Fatalf("decoded trit %d", v)
			}
		}
		again := c.Encode(nil, dst)
		if c != Entropy && string(again) != string(payload) {
			// bits2 and base3 have one payload per trit sequence; a frame
			// has many.
			t.Fatalf("re-encode gives % x, payload % x", again, payload)
		}
		back := make([]int8, n)
		if err := c.Decode(back, again); err != nil || string(unsafeInt8Bytes(back)) != string(unsafeInt8Bytes(dst)) {
			t.Fatalf("re-encoded payload decodes to other trits (%v)", err)
		}
	})
}

// The word-at-a-time encoders write, at every length, the bytes the rule of
// pack/FORMAT.md gives digit by digit: byte j = Σ_k code(trit[per·j+k])·radix^k.
func TestCodecEncodeMatchesDigitRule(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for _, c := range []struct {
		codec      Codec
		per, radix int
	}{{Bits2, 4, 4}, {Base3, 5, 3}} {
		for n := 0; n <= 130; n++ {
			trits := randomTrits(rng, n)
			got := c.codec.Encode(nil, trits)
			require.Len(t, got, (n+c.per-1)/c.per, "%s n=%d", c.codec, n)
			for j := range got {
				want, pow := 0, 1
				for k := 0; k < c.per && c.per*j+k < n; k++ {
					want += int(code(trits[c.per*j+k])) * pow
					pow *= c.radix
				}
				require.Equal(t, byte(want), got[j], "%s n=%d byte %d", c.codec, n, j)
			}
		}
	}
}
