package convert

import (
	"encoding/binary"
	"math"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestEncodeFloat32(t *testing.T) {
	src := []float32{1, -2, 65504, 0.5}
	cases := []struct {
		dtype string
		want  []uint64 // expected bit patterns, per element
	}{
		// IEEE 754 binary16: 1.0 = 0x3C00, -2.0 = 0xC000, 65504 = 0x7BFF, 0.5 = 0x3800.
		{"F16", []uint64{0x3C00, 0xC000, 0x7BFF, 0x3800}},
		// bfloat16 is the upper half of binary32: 1.0 = 0x3F80, -2.0 = 0xC000;
		// 65504 = 0x477FE000 rounds to 0x4780; 0.5 = 0x3F00.
		{"BF16", []uint64{0x3F80, 0xC000, 0x4780, 0x3F00}},
		// IEEE 754 binary32: 1.0 = 0x3F800000, -2.0 = 0xC0000000, 0.5 = 0x3F000000.
		{"F32", []uint64{0x3F800000, 0xC0000000, 0x477FE000, 0x3F000000}},
	}
	for _, c := range cases {
		t.Run(c.dtype, func(t *testing.T) {
			size, _ := DTypeSize(c.dtype)
			prefix := []byte{0xAA}
			out, err := EncodeFloat32(prefix, c.dtype, src)
			require.NoError(t, err)
			require.Equal(t, prefix, out[:1], "appends")
			dst := out[1:]
			require.Len(t, dst, size*len(src))
			for i, w := range c.want {
				var got uint64
				switch size {
				case 2:
					got = uint64(binary.LittleEndian.Uint16(dst[2*i:]))
				case 4:
					got = uint64(binary.LittleEndian.Uint32(dst[4*i:]))
				}
				require.Equal(t, w, got, "element %d", i)
			}
			back := make([]float32, len(src))
			require.NoError(t, DecodeFloat32(c.dtype, dst, back))
			if c.dtype != "BF16" {
				require.Equal(t, src, back, "exact in %s", c.dtype)
			}
		})
	}
	for _, dtype := range []string{"I32", "F64", "F7"} {
		_, err := EncodeFloat32(nil, dtype, src)
		require.ErrorIs(t, err, ErrDType, dtype)
	}
	require.Equal(t, float32(65536), BF16ToFloat32(0x4780), "common practice: bfloat16 has 8 significant bits")
	require.False(t, math.IsInf(float64(BF16ToFloat32(0x4780)), 0))
}
