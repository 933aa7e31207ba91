package convert

import (
	"encoding/binary"
	"fmt"
	"math"
)

// dtypeSizes maps every dtype string this package accepts to its element size
// in bytes.
var dtypeSizes = map[string]int{
	"F64":     8,
	"F32":     4,
	"F16":     2,
	"BF16":    2,
	"F8_E4M3": 1,
	"F8_E5M2": 1,
	"I64":     8,
	"I32":     4,
	"I16":     2,
	"I8":      1,
	"U64":     8,
	"U32":     4,
	"U16":     2,
	"U8":      1,
	"BOOL":    1,
}

// DTypeSize returns the element size in bytes of dtype and whether dtype is
// known.
func DTypeSize(dtype string) (int, bool) {
	n, ok := dtypeSizes[dtype]
	return n, ok
}

// isFloatDType reports whether dtype is one of the wide float dtypes (F64,
// F32, F16, BF16) that the default policy ternarizes.
func isFloatDType(dtype string) bool {
	switch dtype {
	case "F64", "F32", "F16", "BF16":
		return true
	}
	return false
}

// isDecodableDType reports whether DecodeFloat32 can decode dtype: the wide
// float dtypes and the two 8-bit float dtypes.
func isDecodableDType(dtype string) bool {
	return isFloatDType(dtype) || dtype == "F8_E4M3" || dtype == "F8_E5M2"
}

// F16ToFloat32 returns the exact float32 value of the IEEE 754 binary16
// pattern h. NaNs stay NaN (quieted, payload kept in the top bits).
func F16ToFloat32(h uint16) float32 {
	sign := uint32(h&0x8000) << 16
	exp := uint32(h>>10) & 0x1f
	mant := uint32(h & 0x3ff)
	switch exp {
	case 0x1f:
		if mant == 0 {
			return math.Float32frombits(sign | 0x7f800000)
		}
		return math.Float32frombits(sign | 0x7fc00000 | mant<<13)
	case 0:
		// Zero or subnormal: mant × 2^-24, exact in float32.
		v := float32(mant) * (1.0 / (1 << 24))
		if sign != 0 {
			v = -v
		}
		return v
	}
	return math.Float32frombits(sign | (exp+127-15)<<23 | mant<<13)
}

// BF16ToFloat32 returns the float32 whose upper 16 bits are b; bfloat16 is
// the upper half of binary32, so the conversion is exact.
func BF16ToFloat32(b uint16) float32 {
	return math.Float32frombits(uint32(b) << 16)
}

// F8E4M3ToFloat32 returns the exact float32 value of the 8-bit float b with
// 1 sign, 4 exponent (bias 7) and 3 fraction bits, in the variant without
// infinities: S.1111.111 is NaN, S.1111.110 = ±448 is the largest finite
// value, exponent 0 holds the subnormals m × 2^-9.
func F8E4M3ToFloat32(b uint8) float32 {
	sign := uint32(b&0x80) << 24
	exp := uint32(b>>3) & 0xf
	mant := uint32(b & 0x7)
	switch {
	case exp == 0xf && mant == 0x7:
		return math.Float32frombits(sign | 0x7fc00000)
	case exp == 0:
		v := float32(mant) * (1.0 / (1 << 9))
		if sign != 0 {
			v = -v
		}
		return v
	}
	return math.Float32frombits(sign | (exp+127-7)<<23 | mant<<20)
}

// F8E5M2ToFloat32 returns the exact float32 value of the 8-bit float b with
// 1 sign, 5 exponent (bias 15) and 2 fraction bits. Its layout is the upper
// byte of binary16, infinities and NaNs included.
func F8E5M2ToFloat32(b uint8) float32 {
	return F16ToFloat32(uint16(b) << 8)
}

// Float32ToF16 rounds f to the nearest binary16 value, ties to even.
// Values beyond the binary16 range become ±Inf; NaN becomes a quiet NaN
// keeping the top payload bits.
func Float32ToF16(f float32) uint16 {
	b := math.Float32bits(f)
	sign := uint16(b>>16) & 0x8000
	exp := int32(b>>23) & 0xff
	mant := b & 0x7fffff
	if exp == 0xff {
		if mant != 0 {
			return sign | 0x7e00 | uint16(mant>>13)
		}
		return sign | 0x7c00
	}
	if exp == 0 {
		// float32 zero or subnormal: below 2^-126, far under half of the
		// smallest binary16 subnormal.
		return sign
	}
	e := exp - 127 + 15
	if e >= 0x1f {
		return sign | 0x7c00
	}
	if e <= 0 {
		// Result is a binary16 subnormal (or rounds up to the smallest normal).
		m := mant | 0x800000
		shift := uint32(126 - exp) // m × 2^-shift is the value in units of 2^-24
		if shift >= 25 {
			return sign // below half of 2^-24
		}
		q := m >> shift
		rem := m & (1<<shift - 1)
		half := uint32(1) << (shift - 1)
		if rem > half || (rem == half && q&1 == 1) {
			q++
		}
		return sign | uint16(q)
	}
	q := uint32(e)<<10 | mant>>13
	rem := mant & 0x1fff
	if rem > 0x1000 || (rem == 0x1000 && q&1 == 1) {
		q++ // a carry into the exponent is correct, up to 0x7c00 = Inf
	}
	return sign | uint16(q)
}

// Float32ToBF16 rounds f to the nearest bfloat16 value, ties to even.
// NaN stays NaN (quieted).
func Float32ToBF16(f float32) uint16 {
	b := math.Float32bits(f)
	if b&0x7f800000 == 0x7f800000 && b&0x7fffff != 0 {
		return uint16(b>>16) | 0x0040
	}
	b += 0x7fff + (b>>16)&1
	return uint16(b >> 16)
}

// DecodeFloat32 decodes little-endian raw data of a float dtype (F64, F32,
// F16, BF16, F8_E4M3, F8_E5M2) into dst. len(dst) must equal len(raw)/size.
// All but F64 decode exactly; F64 rounds to nearest even, and finite values
// beyond the float32 range become ±Inf (Tensor.DecodeWeights reports them).
// Other dtypes give ErrDType.
func DecodeFloat32(dtype string, raw []byte, dst []float32) error {
	if !isDecodableDType(dtype) {
		if _, known := dtypeSizes[dtype]; known {
			return fmt.Errorf("%w: %q is not a float dtype", ErrDType, dtype)
		}
		return fmt.Errorf("%w: %q", ErrDType, dtype)
	}
	size := dtypeSizes[dtype]
	if len(raw)%size != 0 || len(raw)/size != len(dst) {
		return fmt.Errorf("decode %s: %d bytes do not hold %d values of %d bytes", dtype, len(raw), len(dst), size)
	}
	switch dtype {
	case "F64":
		for i := range dst {
			dst[i] = float32(math.Float64frombits(binary.LittleEndian.Uint64(raw[8*i:])))
		}
	case "F32":
		for i := range dst {
			dst[i] = math.Float32frombits(binary.LittleEndian.Uint32(raw[4*i:]))
		}
	case "F16":
		for i := range dst {
			dst[i] = F16ToFloat32(binary.LittleEndian.Uint16(raw[2*i:]))
		}
	case "BF16":
		for i := range dst {
			dst[i] = BF16ToFloat32(binary.LittleEndian.Uint16(raw[2*i:]))
		}
	case "F8_E4M3":
		for i, b := range raw {
			dst[i] = F8E4M3ToFloat32(b)
		}
	case "F8_E5M2":
		for i, b := range raw {
			dst[i] = F8E5M2ToFloat32(b)
		}
	}
	return nil
}
