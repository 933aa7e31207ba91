package convert

import (
	"encoding/binary"
	"math"
	"os"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"github.com/x448/float16"
)

// interopTensor is one tensor of the cross-implementation fixtures.
type interopTensor struct {
	name   string
	dtype  st.DType
	shape  []int64
	data   []byte
	floats []float32 // expected decode, float dtypes only
}

// interopTensors covers every dtype github.com/nlpodyssey/safetensors
// supports: BOOL U8 I8 I16 U16 F16 BF16 I32 U32 F32 F64 I64 U64.
func interopTensors() []interopTensor {
	var f16 []byte
	for _, v := range []float32{1, -2, 65504, 0.5} {
		f16 = binary.LittleEndian.AppendUint16(f16, float16.Fromfloat32(v).Bits())
	}
	var f32 []byte
	for _, v := range []float32{0.25, -1.5, 3} {
		f32 = binary.LittleEndian.AppendUint32(f32, math.Float32bits(v))
	}
	var f64 []byte
	for _, v := range []float64{0.1, -2} {
		f64 = binary.LittleEndian.AppendUint64(f64, math.Float64bits(v))
	}
	seq := func(n int) []byte {
		b := make([]byte, n)
		for i := range b {
			b[i] = byte(3*i + 1)
		}
		return b
	}
	return []interopTensor{
		{"flags", st.BOOL, []int64{3}, []byte{1, 0, 1}, nil},
		{"bytes", st.U8, []int64{2, 2}, seq(4), nil},
		{"i8", st.I8, []int64{5}, seq(5), nil},
		{"i16", st.I16, []int64{3}, seq(6), nil},
		{"u16", st.U16, []int64{1, 1}, seq(2), nil},
		// F16 bits from x448/float16; IEEE 754 binary16 values 1, -2, 65504, 0.5.
		{"half", st.F16, []int64{2, 2}, f16, []float32{1, -2, 65504, 0.5}},
		// bfloat16 = upper half of binary32: 0x3F80 = 1.0, 0xC000 = -2.0, 0x7F80 = +Inf.
		{"brain", st.BF16, []int64{3}, []byte{0x80, 0x3f, 0x00, 0xc0, 0x80, 0x7f}, []float32{1, -2, float32(math.Inf(1))}},
		{"i32", st.I32, []int64{2}, seq(8), nil},
		{"u32", st.U32, []int64{1}, seq(4), nil},
		{"single", st.F32, []int64{3, 1}, f32, []float32{0.25, -1.5, 3}},
		// F64 decodes to the nearest float32.
		{"double", st.F64, []int64{2}, f64, []float32{float32(0.1), -2}},
		{"i64", st.I64, []int64{1}, seq(8), nil},
		{"u64", st.U64, []int64{2}, seq(16), nil},
		{"none", st.F32, []int64{0, 3}, []byte{}, []float32{}},
	}
}

func u64Shape(s []int64) []uint64 {
	out := make([]uint64, len(s))
	for i, d := range s {
		out[i] = uint64(d)
	}
	return out
}

// A file serialized by github.com/nlpodyssey/safetensors opens here with the
// same names, dtypes, shapes and bytes.
func TestOpenFileWrittenByIndependentLibrary(t *testing.T) {
	tensors := interopTensors()
	views := map[string]st.TensorView{}
	for _, tc := range tensors {
		v, err := st.NewTensorView(tc.dtype, u64Shape(tc.shape), tc.data)
		require.NoError(t, err, tc.name)
		views[tc.name] = v
	}
	file, err := st.Serialize(views, map[string]string{"origin": "independent"})
	require.NoError(t, err)
	path := writeTemp(t, "lib.safetensors", file)

	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	assert.Equal(t, map[string]string{"origin": "independent"}, s.Metadata)
	require.Len(t, s.Tensors, len(tensors))
	byName := map[string]*Tensor{}
	for _, tn := range s.Tensors {
		byName[tn.Name] = tn
	}
	data, _ := walkAll(t, s)
	for _, tc := range tensors {
		t.Run(tc.name, func(t *testing.T) {
			tn := byName[tc.name]
			require.NotNil(t, tn)
			assert.Equal(t, tc.dtype.String(), tn.DType)
			assert.Equal(t, tc.shape, tn.Shape)
			assert.Equal(t, tc.data, data[tc.name])
			assert.Equal(t, tc.data, file[tn.Offset:tn.Offset+tn.Length])
			assert.Equal(t, tc.floats != nil, tn.IsFloat())
			if tc.floats != nil {
				dst := make([]float32, tn.NumElements())
				require.NoError(t, DecodeFloat32(tn.DType, data[tc.name], dst))
				assert.Equal(t, tc.floats, dst)
			}
		})
	}
}

// A file written by WriteFile is read back by github.com/nlpodyssey/safetensors
// (Deserialize) with the same names, dtypes, shapes, bytes and metadata.
func TestWriteFileReadByIndependentLibrary(t *testing.T) {
	tensors := interopTensors()
	var wts []WriteTensor
	for _, tc := range tensors {
		wts = append(wts, WriteTensor{Name: tc.name, DType: tc.dtype.String(), Shape: tc.shape, Data: tc.data})
	}
	// A scalar: shape [] holds one element.
	wts = append(wts, WriteTensor{Name: "scalar", DType: "I32", Shape: []int64{}, Data: []byte{9, 0, 0, 0}})
	path := t.TempDir() + "/ours.safetensors"
	meta := map[string]string{"b": "2", "a": "1 \"quoted\" <tag>"}
	require.NoError(t, WriteFile(path, wts, meta))
	file, err := os.ReadFile(path)
	require.NoError(t, err)

	got, err := st.Deserialize(file)
	require.NoError(t, err)
	_, md, err := st.ReadMetadata(file)
	require.NoError(t, err)
	assert.Equal(t, meta, md.Metadata())
	require.Equal(t, len(wts), got.Len())
	for _, wt := range wts {
		v, ok := got.Tensor(wt.Name)
		require.True(t, ok, wt.Name)
		assert.Equal(t, wt.DType, v.DType().String(), wt.Name)
		assert.Equal(t, u64Shape(wt.Shape), v.Shape(), wt.Name)
		assert.Equal(t, wt.Data, v.Data(), wt.Name)
	}
}
