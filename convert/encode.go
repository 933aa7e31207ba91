package convert

import (
	"encoding/binary"
	"fmt"
	"math"
)

// EncodeFloat32 appends v to dst as little-endian F32, F16 or BF16 (the
// latter two rounding to nearest even).
func EncodeFloat32(dst []byte, dtype string, v []float32) ([]byte, error) {
	switch dtype {
	case "F32":
		for _, f := range v {
			dst = binary.LittleEndian.AppendUint32(dst, math.Float32bits(f))
		}
	case "F16":
		for _, f := range v {
			dst = binary.LittleEndian.AppendUint16(dst, Float32ToF16(f))
		}
	case "BF16":
		for _, f := range v {
			dst = binary.LittleEndian.AppendUint16(dst, Float32ToBF16(f))
		}
	default:
		return dst, fmt.Errorf("%w: cannot encode to %q (want F32, F16 or BF16)", ErrDType, dtype)
	}
	return dst, nil
}
