package convert

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"github.com/x448/float16"
)

// le32s reads little-endian uint32 values.
func le32s(b []byte) []uint32 {
	out := make([]uint32, len(b)/4)
	for i := range out {
		out[i] = binary.LittleEndian.Uint32(b[4*i:])
	}
	return out
}

// Every binary16 pattern decodes as numpy (Debian python3-numpy) converts
// float16 to float32; NaN patterns decode to NaN on both sides (payloads
// aside).
func TestF16DecodeAllPatternsAgainstNumpy(t *testing.T) {
	out := runNumpy(t, `
h = np.arange(65536, dtype=np.uint32).astype(np.uint16)
f = h.view(np.float16).astype(np.float32)
sys.stdout.buffer.write(f.view(np.uint32).astype('<u4').tobytes())
`, nil)
	want := le32s(out)
	require.Len(t, want, 1<<16)
	for i, w := range want {
		got := F16ToFloat32(uint16(i))
		wf := math.Float32frombits(w)
		if math.IsNaN(float64(wf)) {
			if !math.IsNaN(float64(got)) {
				t.Fatalf("F16ToFloat32(%#04x) = %v, numpy gives NaN", i, got)
			}
			continue
		}
		if math.Float32bits(got) != w {
			t.Fatalf("F16ToFloat32(%#04x) = %#08x, numpy gives %#08x", i, math.Float32bits(got), w)
		}
	}
}

// Every bfloat16 pattern decodes to numpy's (Debian python3-numpy) float32
// view of the pattern shifted into the upper 16 bits, NaN payloads included.
func TestBF16DecodeAllPatternsAgainstNumpy(t *testing.T) {
	out := runNumpy(t, `
f = (np.arange(65536, dtype=np.uint32) << 16).view(np.float32)
sys.stdout.buffer.write(f.view(np.uint32).astype('<u4').tobytes())
`, nil)
	want := le32s(out)
	require.Len(t, want, 1<<16)
	for i, w := range want {
		if got := math.Float32bits(BF16ToFloat32(uint16(i))); got != w {
			t.Fatalf("BF16ToFloat32(%#04x) = %#08x, numpy gives %#08x", i, got, w)
		}
	}
}

// F64 decoding rounds as numpy (Debian python3-numpy) casts float64 to
// float32: to nearest, ties to even, finite values past the float32 range
// to ±Inf. The inputs are random patterns plus the edges of that range and
// exact halfway points.
func TestF64DecodeAgainstNumpy(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 64))
	var in []float64
	for range 20000 {
		in = append(in, math.Float64frombits(rng.Uint64()))
	}
	for range 20000 { // values inside the float32 range, with all fraction bits
		in = append(in, math.Ldexp(rng.Float64()+0.5, rng.IntN(300)-150))
	}
	maxHalf := math.Ldexp(2-math.Ldexp(1, -24), 127) // halfway between MaxFloat32 and 2^128
	in = append(in, 0, math.Copysign(0, -1), math.MaxFloat32, maxHalf, math.Nextafter(maxHalf, 0),
		math.Nextafter(maxHalf, math.Inf(1)), -maxHalf, 1e300, -1e300, math.Inf(1), math.Inf(-1),
		1+math.Ldexp(1, -24), 1+3*math.Ldexp(1, -24), math.SmallestNonzeroFloat32, math.SmallestNonzeroFloat32/2,
		math.SmallestNonzeroFloat32*0.75, math.SmallestNonzeroFloat64)
	raw := f64LE(in...)
	out := runNumpy(t, `
d = np.frombuffer(sys.stdin.buffer.read(), dtype='<f8')
with np.errstate(over='ignore', invalid='ignore'):
    f = d.astype(np.float32)
sys.stdout.buffer.write(f.view(np.uint32).astype('<u4').tobytes())
`, raw)
	want := le32s(out)
	require.Len(t, want, len(in))
	got := make([]float32, len(in))
	require.NoError(t, DecodeFloat32("F64", raw, got))
	for i, w := range want {
		g := math.Float32bits(got[i])
		if math.IsNaN(in[i]) {
			require.True(t, math.IsNaN(float64(got[i])), "F64 NaN %#016x decodes to %v", math.Float64bits(in[i]), got[i])
			continue
		}
		if g != w {
			t.Fatalf("F64 %v (%#016x) decodes to %#08x, numpy gives %#08x", in[i], math.Float64bits(in[i]), g, w)
		}
	}
}

// 8-bit floats, values from the published 8-bit floating point
// specification's tables (from memory): E4M3 has bias 7, no infinities,
// S.1111.111 as its only NaN and 448 as its largest value; E5M2 has bias 15
// and follows the binary16 conventions, 57344 being its largest value.
func TestF8KnownValues(t *testing.T) {
	e4m3 := []struct {
		bits uint8
		want float64
	}{
		{0x38, 1}, {0xC0, -2}, {0x7E, 448}, {0xFE, -448},
		{0x08, math.Ldexp(1, -6)},         // smallest normal
		{0x07, 0.875 * math.Ldexp(1, -6)}, // largest subnormal
		{0x01, math.Ldexp(1, -9)},         // smallest subnormal
		{0x78, 256}, {0x00, 0},
	}
	for _, tc := range e4m3 {
		assert.Equal(t, float32(tc.want), F8E4M3ToFloat32(tc.bits), "E4M3 %#02x", tc.bits)
	}
	for _, nan := range []uint8{0x7F, 0xFF} {
		assert.True(t, math.IsNaN(float64(F8E4M3ToFloat32(nan))), "E4M3 %#02x is NaN", nan)
	}
	assert.True(t, math.Signbit(float64(F8E4M3ToFloat32(0x80))), "E4M3 0x80 is -0")

	e5m2 := []struct {
		bits uint8
		want float64
	}{
		{0x3C, 1}, {0xC0, -2}, {0x7B, 57344}, {0xFB, -57344},
		{0x04, math.Ldexp(1, -14)}, // smallest normal
		{0x01, math.Ldexp(1, -16)}, // smallest subnormal
		{0x7C, math.Inf(1)}, {0xFC, math.Inf(-1)}, {0x00, 0},
	}
	for _, tc := range e5m2 {
		assert.Equal(t, float32(tc.want), F8E5M2ToFloat32(tc.bits), "E5M2 %#02x", tc.bits)
	}
	for _, nan := range []uint8{0x7D, 0x7E, 0x7F, 0xFD, 0xFE, 0xFF} {
		assert.True(t, math.IsNaN(float64(F8E5M2ToFloat32(nan))), "E5M2 %#02x is NaN", nan)
	}
}

// All 256 patterns of each 8-bit float. E4M3 has no outside decoder here:
// numpy has no 8-bit floats and Debian's python3-torch (1.13) predates
// torch.float8_e4m3fn, so its check is the published 8-bit floating point
// specification's formula, from memory, evaluated in float64:
// (-1)^s × 2^(e-7) × (1 + m/8) for e > 0 and (-1)^s × 2^-6 × m/8 for e = 0.
// It is not an independent implementation; TestF8KnownValues pins the
// table values beside it. E5M2 is checked against github.com/x448/float16
// decoding the byte as the upper half of binary16 (E5M2's layout, from
// memory of the same specification).
func TestF8DecodeAllPatterns(t *testing.T) {
	for i := range 256 {
		b := uint8(i)
		s, e, m := float64(1), int(b>>3)&0xf, float64(b&7)
		if b&0x80 != 0 {
			s = -1
		}
		got := F8E4M3ToFloat32(b)
		switch {
		case e == 15 && m == 7:
			require.True(t, math.IsNaN(float64(got)), "E4M3 %#02x", b)
		case e == 0:
			require.Equal(t, float32(s*math.Ldexp(m/8, -6)), got, "E4M3 %#02x", b)
		default:
			require.Equal(t, float32(s*math.Ldexp(1+m/8, e-7)), got, "E4M3 %#02x", b)
		}

		want := float16.Frombits(uint16(b) << 8).Float32()
		got = F8E5M2ToFloat32(b)
		if math.IsNaN(float64(want)) {
			require.True(t, math.IsNaN(float64(got)), "E5M2 %#02x", b)
			continue
		}
		require.Equal(t, math.Float32bits(want), math.Float32bits(got), "E5M2 %#02x", b)
	}
	// DecodeFloat32 decodes both 8-bit dtypes element by element.
	dst := make([]float32, 2)
	require.NoError(t, DecodeFloat32("F8_E4M3", []byte{0x38, 0x7E}, dst))
	assert.Equal(t, []float32{1, 448}, dst)
	require.NoError(t, DecodeFloat32("F8_E5M2", []byte{0x3C, 0x7B}, dst))
	assert.Equal(t, []float32{1, 57344}, dst)
}
