package convert

import (
	"encoding/binary"
	"math"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"github.com/x448/float16"
)

func TestDTypeSize(t *testing.T) {
	// Element sizes of the safetensors dtypes (format description; the
	// widths are implied by the names: F64 is 8 bytes, F8_* 1 byte, ...).
	tests := []struct {
		dtype string
		size  int
		ok    bool
	}{
		{"F64", 8, true}, {"F32", 4, true}, {"F16", 2, true}, {"BF16", 2, true},
		{"F8_E4M3", 1, true}, {"F8_E5M2", 1, true},
		{"I64", 8, true}, {"I32", 4, true}, {"I16", 2, true}, {"I8", 1, true},
		{"U64", 8, true}, {"U32", 4, true}, {"U16", 2, true}, {"U8", 1, true},
		{"BOOL", 1, true},
		{"f32", 0, false}, {"", 0, false}, {"F128", 0, false},
	}
	for _, tc := range tests {
		size, ok := DTypeSize(tc.dtype)
		assert.Equal(t, tc.size, size, tc.dtype)
		assert.Equal(t, tc.ok, ok, tc.dtype)
	}
}

func TestF16KnownValues(t *testing.T) {
	// IEEE 754 binary16 values (the standard).
	tests := []struct {
		bits uint16
		want float32
	}{
		{0x3C00, 1.0},
		{0xC000, -2.0},
		{0x7BFF, 65504},
		{0x0400, float32(math.Ldexp(1, -14))}, // smallest normal
		{0x0001, float32(math.Ldexp(1, -24))}, // smallest subnormal
		{0x7C00, float32(math.Inf(1))},
		{0xFC00, float32(math.Inf(-1))},
		{0x0000, 0},
	}
	for _, tc := range tests {
		assert.Equal(t, tc.want, F16ToFloat32(tc.bits), "decode %#04x", tc.bits)
		assert.Equal(t, tc.bits, Float32ToF16(tc.want), "encode %v", tc.want)
	}
	// Negative zero keeps its sign (IEEE 754 binary16: sign bit 0x8000).
	assert.True(t, math.Signbit(float64(F16ToFloat32(0x8000))))
	assert.Equal(t, uint16(0x8000), Float32ToF16(float32(math.Copysign(0, -1))))
	// Exponent all ones with a nonzero fraction is NaN (the standard).
	assert.True(t, math.IsNaN(float64(F16ToFloat32(0x7E00))))
	assert.True(t, math.IsNaN(float64(F16ToFloat32(0x7C01))))
}

func TestBF16KnownValues(t *testing.T) {
	// bfloat16 is the upper half of IEEE 754 binary32: 0x3F80 = 1.0,
	// 0xC000 = -2.0, 0x7F80 = +Inf.
	tests := []struct {
		bits uint16
		want float32
	}{
		{0x3F80, 1.0},
		{0xC000, -2.0},
		{0x7F80, float32(math.Inf(1))},
	}
	for _, tc := range tests {
		assert.Equal(t, tc.want, BF16ToFloat32(tc.bits), "decode %#04x", tc.bits)
		assert.Equal(t, tc.bits, Float32ToBF16(tc.want), "encode %v", tc.want)
	}
}

// Every binary16 pattern decodes as github.com/x448/float16 decodes it; for
// NaN patterns both give NaN.
func TestF16DecodeAllPatternsAgainstX448(t *testing.T) {
	for i := 0; i < 1<<16; i++ {
		h := uint16(i)
		got := F16ToFloat32(h)
		want := float16.Frombits(h).Float32()
		if math.IsNaN(float64(want)) {
			if !math.IsNaN(float64(got)) {
				t.Fatalf("F16ToFloat32(%#04x) = %v, want NaN", h, got)
			}
			continue
		}
		if math.Float32bits(got) != math.Float32bits(want) {
			t.Fatalf("F16ToFloat32(%#04x) = %v (%#08x), want %v (%#08x)", h, got, math.Float32bits(got), want, math.Float32bits(want))
		}
		// Every non-NaN binary16 value survives the round trip.
		if back := Float32ToF16(got); back != h {
			t.Fatalf("Float32ToF16(F16ToFloat32(%#04x)) = %#04x", h, back)
		}
	}
}

// Float32ToF16 rounds as github.com/x448/float16's Fromfloat32 does (IEEE
// round to nearest, ties to even), over exact halfway points between adjacent
// binary16 values, their float32 neighbours, and a sweep of all float32
// patterns.
func TestFloat32ToF16AgainstX448(t *testing.T) {
	var inputs []float32
	for i := 0; i < 0x7C00; i++ {
		lo, hi := F16ToFloat32(uint16(i)), F16ToFloat32(uint16(i+1))
		mid := (lo + hi) / 2 // exact: the sum needs at most 12 significant bits
		for _, v := range []float32{mid, math.Nextafter32(mid, 0), math.Nextafter32(mid, float32(math.Inf(1)))} {
			inputs = append(inputs, v, -v)
		}
	}
	for b := uint64(0); b < 1<<32; b += 65521 { // a prime stride hits every exponent and many fractions
		inputs = append(inputs, math.Float32frombits(uint32(b)))
	}
	inputs = append(inputs, float32(math.Inf(1)), float32(math.Inf(-1)), math.MaxFloat32, -math.MaxFloat32,
		math.SmallestNonzeroFloat32, 65520, 65519.998, float32(math.NaN()))

	inexact := 0
	for _, f := range inputs {
		got := Float32ToF16(f)
		want := float16.Fromfloat32(f).Bits()
		if math.IsNaN(float64(f)) {
			require.True(t, float16.Frombits(got).IsNaN(), "Float32ToF16(NaN %#08x) = %#04x", math.Float32bits(f), got)
			continue
		}
		if got != want {
			t.Fatalf("Float32ToF16(%v = %#08x) = %#04x, want %#04x", f, math.Float32bits(f), got, want)
		}
		if F16ToFloat32(got) != f {
			inexact++
		}
	}
	assert.Greater(t, inexact, 0x7C00*2, "most inputs need rounding")
	// Ties to even at the top of the range: 65520 is halfway between 65504
	// (0x7BFF, odd) and 65536, so it rounds to +Inf (IEEE 754 rounding).
	assert.Equal(t, uint16(0x7C00), Float32ToF16(65520))
}

// Every bfloat16 pattern decodes to the binary32 whose upper half it is
// (IEEE 754 binary32 layout), NaN payloads included.
func TestBF16DecodeAllPatterns(t *testing.T) {
	for i := 0; i < 1<<16; i++ {
		b := uint16(i)
		got := math.Float32bits(BF16ToFloat32(b))
		if want := uint32(b) << 16; got != want {
			t.Fatalf("BF16ToFloat32(%#04x) bits = %#08x, want %#08x", b, got, want)
		}
		f := BF16ToFloat32(b)
		if back := Float32ToBF16(f); !math.IsNaN(float64(f)) && back != b {
			t.Fatalf("Float32ToBF16(BF16ToFloat32(%#04x)) = %#04x", b, back)
		}
	}
}

func TestFloat32ToBF16Rounding(t *testing.T) {
	// Round to nearest, ties to even on the dropped low 16 bits of the
	// IEEE 754 binary32 pattern (worked by hand).
	tests := []struct {
		name string
		in   uint32
		want uint16
	}{
		{"exact", 0x3F800000, 0x3F80},
		{"below half", 0x3F807FFF, 0x3F80},
		{"half to even down", 0x3F808000, 0x3F80},
		{"half to even up", 0x3F818000, 0x3F82},
		{"above half", 0x3F808001, 0x3F81},
		{"negative half to even", 0xBF808000, 0xBF80},
		{"max float rounds to inf", 0x7F7FFFFF, 0x7F80},
		{"largest that stays finite", 0x7F7F7FFF, 0x7F7F},
		{"inf", 0x7F800000, 0x7F80},
		{"negative inf", 0xFF800000, 0xFF80},
	}
	for _, tc := range tests {
		assert.Equal(t, tc.want, Float32ToBF16(math.Float32frombits(tc.in)), tc.name)
	}
	// NaN stays NaN, also when its payload lives only in the low 16 bits.
	for _, nan := range []uint32{0x7FC00000, 0x7F800001, 0xFF800001, 0x7FFFFFFF} {
		got := Float32ToBF16(math.Float32frombits(nan))
		assert.True(t, math.IsNaN(float64(BF16ToFloat32(got))), "%#08x -> %#04x", nan, got)
	}
}

func TestDecodeFloat32(t *testing.T) {
	le16 := func(v ...uint16) []byte {
		var b []byte
		for _, x := range v {
			b = binary.LittleEndian.AppendUint16(b, x)
		}
		return b
	}
	tests := []struct {
		name  string
		dtype string
		raw   []byte
		n     int
		want  []float32
		err   error
	}{
		// IEEE 754 binary16 values (the standard).
		{"F16", "F16", le16(0x3C00, 0xC000, 0x7BFF), 3, []float32{1, -2, 65504}, nil},
		// bfloat16 = binary32 upper half.
		{"BF16", "BF16", le16(0x3F80, 0xC000), 2, []float32{1, -2}, nil},
		{"F32", "F32", f32LE(1.5, -0.25, math.MaxFloat32), 3, []float32{1.5, -0.25, math.MaxFloat32}, nil},
		// F64 rounds to the nearest float32 (IEEE 754 round to nearest even).
		{"F64", "F64", f64LE(0.1, 1e300, -3), 3, []float32{float32(0.1), float32(math.Inf(1)), -3}, nil},
		// 1 + 2^-24 is halfway between float32 1 and 1 + 2^-23: ties to even gives 1.
		{"F64 tie", "F64", f64LE(1 + math.Ldexp(1, -24)), 1, []float32{1}, nil},
		{"empty", "F32", nil, 0, []float32{}, nil},
		{"integer dtype", "I32", f32LE(1), 1, nil, ErrDType},
		// 8-bit floats (published 8-bit float specification, from memory):
		// E4M3 0x01 = 2^-9, E5M2 0x01 = 2^-16.
		{"F8_E4M3", "F8_E4M3", []byte{1}, 1, []float32{float32(math.Ldexp(1, -9))}, nil},
		{"F8_E5M2", "F8_E5M2", []byte{1}, 1, []float32{float32(math.Ldexp(1, -16))}, nil},
		{"bool dtype", "BOOL", []byte{1}, 1, nil, ErrDType},
		{"unknown dtype", "F7", []byte{1}, 1, nil, ErrDType},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dst := make([]float32, tc.n)
			err := DecodeFloat32(tc.dtype, tc.raw, dst)
			if tc.err != nil {
				assert.ErrorIs(t, err, tc.err)
				assert.Contains(t, err.Error(), `"`+tc.dtype+`"`)
				return
			}
			require.NoError(t, err)
			assert.Equal(t, tc.want, dst)
		})
	}
}

func TestDecodeFloat32LengthMismatch(t *testing.T) {
	tests := []struct {
		name string
		raw  int
		dst  int
		want string
	}{
		{"partial element", 5, 1, "decode F32: 5 bytes do not hold 1 values of 4 bytes"},
		{"dst too short", 8, 1, "decode F32: 8 bytes do not hold 1 values of 4 bytes"},
		{"dst too long", 8, 3, "decode F32: 8 bytes do not hold 3 values of 4 bytes"},
	}
	for _, tc := range tests {
		err := DecodeFloat32("F32", make([]byte, tc.raw), make([]float32, tc.dst))
		assert.EqualError(t, err, tc.want, tc.name)
	}
}
