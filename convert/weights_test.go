package convert

import (
	"math"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestDecodeWeights(t *testing.T) {
	const base = 1000 // absolute offset of the tensor's first byte
	tests := []struct {
		name     string
		dtype    string
		raw      []byte
		want     []float32
		sentinel error
		offset   int64  // of the error
		detail   string // in the message
	}{
		{"F32", "F32", f32LE(1, -0.5), []float32{1, -0.5}, nil, 0, ""},
		// IEEE 754 binary16: 0x3C00 = 1, 0xC000 = -2.
		{"F16", "F16", []byte{0x00, 0x3c, 0x00, 0xc0}, []float32{1, -2}, nil, 0, ""},
		{"F8_E4M3", "F8_E4M3", []byte{0x38, 0x7E}, []float32{1, 448}, nil, 0, ""},
		{"F8_E5M2", "F8_E5M2", []byte{0x3C, 0xC0}, []float32{1, -2}, nil, 0, ""},
		{"F32 NaN", "F32", f32LE(1, 2, float32(math.NaN())), nil, ErrNonFinite, base + 8, "element 2 is NaN"},
		// IEEE 754 binary16 0x7C00 = +Inf; bfloat16 0xFF80 = -Inf.
		{"F16 Inf", "F16", []byte{0x00, 0x3c, 0x00, 0x7c}, nil, ErrNonFinite, base + 2, "element 1 is +Inf"},
		{"BF16 -Inf", "BF16", []byte{0x80, 0xff}, nil, ErrNonFinite, base, "element 0 is -Inf"},
		{"F8_E4M3 NaN", "F8_E4M3", []byte{0x38, 0x38, 0xFF}, nil, ErrNonFinite, base + 2, "element 2 is NaN"},
		{"F64 overflow", "F64", f64LE(1, -1e300), nil, ErrNonFinite, base + 8, "element 1: F64 value -1e+300 overflows float32 to -Inf"},
		{"F64 Inf", "F64", f64LE(math.Inf(1)), nil, ErrNonFinite, base, "element 0 is +Inf"},
		{"integer", "I32", f32LE(1), nil, ErrDType, base, `dtype "I32": integer and BOOL tensors are always kept`},
		{"BOOL", "BOOL", []byte{1}, nil, ErrDType, base, `dtype "BOOL": integer and BOOL`},
		{"unknown", "F7", []byte{1}, nil, ErrDType, base, `dtype "F7": a dtype this version does not know can be kept byte for byte, never ternarized`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			size, _ := DTypeSize(tc.dtype)
			n := len(tc.raw)
			if size > 0 {
				n /= size
			}
			tn := &Tensor{Name: "w", DType: tc.dtype, Shape: []int64{int64(n)}, File: "m.safetensors", Offset: base, Length: int64(len(tc.raw))}
			dst := make([]float32, n)
			err := tn.DecodeWeights(tc.raw, dst)
			if tc.sentinel == nil {
				require.NoError(t, err)
				assert.Equal(t, tc.want, dst)
				assert.True(t, tn.Ternarizable())
				return
			}
			require.ErrorIs(t, err, tc.sentinel)
			var ie *InputError
			require.ErrorAs(t, err, &ie)
			assert.Equal(t, "m.safetensors", ie.File)
			assert.Equal(t, "w", ie.Tensor)
			assert.Equal(t, tc.offset, ie.Offset)
			assert.Contains(t, err.Error(), tc.detail)
			assert.Equal(t, strings.ToLower(err.Error()[:1]), err.Error()[:1])
			if tc.sentinel == ErrDType {
				assert.False(t, tn.Ternarizable())
			}
		})
	}
}
