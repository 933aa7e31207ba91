package convert

import (
	"encoding/binary"
	"fmt"
	"math"
)

// EncodeFloat32 writes src as little-endian values of a float dtype (F64,
// F32, F16, BF16) into dst, which must hold len(src) × size bytes. F64 and
// F32 are exact; F16 and BF16 round to nearest, ties to even. Other dtypes
// give ErrDType.
func EncodeFloat32(dtype string, src []float32, dst []byte) error {
	if !isFloatDType(dtype) {
		return fmt.Errorf("%w: cannot encode floats as %q", ErrDType, dtype)
	}
	size := dtypeSizes[dtype]
	if len(dst) != size*len(src) {
		return fmt.Errorf("encode %s: %d bytes do not hold %d values of %d bytes", dtype, len(dst), len(src), size)
	}
	switch dtype {
	case "F64":
		for i, f := range src {
			binary.LittleEndian.PutUint64(dst[8*i:], math.Float64bits(float64(f)))
		}
	case "F32":
		for i, f := range src {
			binary.LittleEndian.PutUint32(dst[4*i:], math.Float32bits(f))
		}
	case "F16":
		for i, f := range src {
			binary.LittleEndian.PutUint16(dst[2*i:], Float32ToF16(f))
		}
	case "BF16":
		for i, f := range src {
			binary.LittleEndian.PutUint16(dst[2*i:], Float32ToBF16(f))
		}
	}
	return nil
}
