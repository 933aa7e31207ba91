package convert

import (
	"encoding/binary"
	"fmt"
	"os"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// The fixture follows the published safetensors format description: 8-byte
// little-endian header length, JSON header whose data_offsets are relative to
// the start of the data section, tensors in C order, little-endian. Keys are
// deliberately not in data order; a scalar (shape []) and a zero-size tensor
// are legal.
func TestOpenHandBuiltFixture(t *testing.T) {
	header := `{"__metadata__":{"format":"pt"},` +
		`"bias":{"dtype":"U8","shape":[3],"data_offsets":[6,9]},` +
		`"empty":{"dtype":"F32","shape":[0,4],"data_offsets":[6,6]},` +
		`"scale":{"dtype":"F16","shape":[],"data_offsets":[4,6]},` +
		`"w":{"dtype":"BF16","shape":[2],"data_offsets":[0,4]}}`
	data := []byte{
		0x80, 0x3f, 0x00, 0xc0, // w: BF16 0x3F80 = 1.0, 0xC000 = -2.0 (IEEE 754 binary32 upper halves)
		0x00, 0x3c, // scale: F16 0x3C00 = 1.0 (IEEE 754 binary16)
		7, 8, 9, // bias
	}
	file := stFile(header, data)
	path := writeTemp(t, "fixture.safetensors", file)
	n := paddedLen(header)
	require.Equal(t, uint64(n), binary.LittleEndian.Uint64(file[:8]), "fixture length field")

	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()

	assert.Equal(t, map[string]string{"format": "pt"}, s.Metadata)
	require.Len(t, s.Files, 1)
	assert.Equal(t, SourceFile{Path: path, Size: int64(len(file))}, s.Files[0])

	dataStart := 8 + n
	tests := []struct {
		name     string
		dtype    string
		shape    []int64
		offset   int64
		length   int64
		elements int64
		isFloat  bool
		bytes    []byte
	}{
		{"w", "BF16", []int64{2}, dataStart + 0, 4, 2, true, data[0:4]},
		{"scale", "F16", []int64{}, dataStart + 4, 2, 1, true, data[4:6]},
		{"empty", "F32", []int64{0, 4}, dataStart + 6, 0, 0, true, []byte{}},
		{"bias", "U8", []int64{3}, dataStart + 6, 3, 3, false, data[6:9]},
	}
	require.Len(t, s.Tensors, len(tests))
	got, _ := walkAll(t, s)
	for i, tc := range tests {
		tn := s.Tensors[i]
		assert.Equal(t, tc.name, tn.Name, "data-offset order")
		assert.Equal(t, tc.dtype, tn.DType)
		assert.Equal(t, tc.shape, tn.Shape)
		assert.Equal(t, path, tn.File)
		assert.Equal(t, tc.offset, tn.Offset, tc.name)
		assert.Equal(t, tc.length, tn.Length, tc.name)
		assert.Equal(t, tc.elements, tn.NumElements(), tc.name)
		assert.Equal(t, tc.isFloat, tn.IsFloat(), tc.name)
		assert.Equal(t, tc.bytes, got[tc.name], tc.name)
		// The absolute offset points at the tensor's bytes in the file.
		assert.Equal(t, tc.bytes, file[tn.Offset:tn.Offset+tn.Length], tc.name)
	}

	vals := make([]float32, 2)
	require.NoError(t, DecodeFloat32("BF16", got["w"], vals))
	assert.Equal(t, []float32{1, -2}, vals)
	one := make([]float32, 1)
	require.NoError(t, DecodeFloat32("F16", got["scale"], one))
	assert.Equal(t, []float32{1}, one)
}

// Opening a file without "__metadata__" leaves Metadata nil; an empty header
// object is a valid file with no tensors.
func TestOpenMinimal(t *testing.T) {
	tests := []struct {
		name   string
		header string
		data   []byte
		want   []Tensor // File and Offset filled in below
	}{
		{"empty object", `{}`, nil, nil},
		{"one scalar", `{"x":{"dtype":"I64","shape":[],"data_offsets":[0,8]}}`, make([]byte, 8),
			[]Tensor{{Name: "x", DType: "I64", Shape: []int64{}, Length: 8}}},
		{"whitespace in JSON", "{ \"x\" :\n{\"shape\" : [ 1 ] , \"data_offsets\":[0 , 1],\"dtype\":\"BOOL\"} }", []byte{1},
			[]Tensor{{Name: "x", DType: "BOOL", Shape: []int64{1}, Length: 1}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			path := writeTemp(t, "m.safetensors", stFile(tc.header, tc.data))
			s, err := Open(path)
			require.NoError(t, err)
			defer s.Close()
			assert.Nil(t, s.Metadata)
			require.Len(t, s.Tensors, len(tc.want))
			for i, w := range tc.want {
				got := s.Tensors[i]
				assert.Equal(t, w.Name, got.Name)
				assert.Equal(t, w.DType, got.DType)
				assert.Equal(t, w.Shape, append([]int64{}, got.Shape...))
				assert.Equal(t, w.Length, got.Length)
				assert.Equal(t, path, got.File)
				// the data section starts after the 8 length bytes and the
				// header stFile padded to a multiple of 8
				assert.Equal(t, int64(len(stFile(tc.header, nil))), got.Offset)
			}
		})
	}
}

func TestOpenBadInput(t *testing.T) {
	const entry = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`
	// at returns the absolute offset of the first occurrence of marker in the
	// header (which starts at byte 8).
	at := func(header, marker string) int64 {
		i := strings.Index(header, marker)
		if i < 0 {
			panic("marker " + marker + " not in header")
		}
		return 8 + int64(i)
	}
	data := func(header string, rel int64) int64 { return 8 + paddedLen(header) + rel }

	type tc struct {
		name     string
		file     []byte
		sentinel error
		tensor   string
		offset   int64
	}
	var tests []tc
	add := func(c tc) { tests = append(tests, c) }

	add(tc{"file shorter than 8 bytes", []byte{1, 0, 0, 0, 0}, ErrTruncated, "", 0})
	add(tc{"empty file", nil, ErrTruncated, "", 0})
	add(tc{"truncated data", stFile(entry, make([]byte, 4)), ErrTruncated, "w", data(entry, 0)})
	add(tc{"header length past end of file", rawFile(1000, entry, nil), ErrTruncated, "", 0})
	// Reference cap on the header length: 100,000,000 bytes (format description).
	add(tc{"header over the cap", rawFile(100_000_001, entry, nil), ErrHeader, "", 0})
	add(tc{"header length max uint64", rawFile(^uint64(0), entry, nil), ErrHeader, "", 0})

	h := "{\"w\xff\":{\"dtype\":\"F32\",\"shape\":[2],\"data_offsets\":[0,8]}}"
	add(tc{"header not UTF-8", stFile(h, make([]byte, 8)), ErrHeader, "", at(h, "\xff")})

	h = `{"w":{"dtype":"F32",}}`
	add(tc{"invalid JSON", stFile(h, nil), ErrHeader, "w", at(h, ",}") + 1})
	h = `{"w":{"dtype":"F32"`
	add(tc{"JSON cut short", stFile(h, nil), ErrHeader, "w", 8 + paddedLen(h)})
	add(tc{"empty header", rawFile(0, "", nil), ErrHeader, "", 8})

	h = `[1,2]`
	add(tc{"JSON not an object", stFile(h, nil), ErrHeader, "", 8})
	h = `"abc"`
	add(tc{"JSON string", stFile(h, nil), ErrHeader, "", 8})
	h = `{} {}`
	add(tc{"data after the object", stFile(h, nil), ErrHeader, "", at(h, " {") + 1})
	h = `{}x`
	add(tc{"garbage after the object", stFile(h, nil), ErrHeader, "", at(h, "x")})

	h = `{"__metadata__":{"a":1},"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"metadata with a non-string value", stFile(h, make([]byte, 8)), ErrHeader, "", at(h, "1}")})
	h = `{"__metadata__":[],"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"metadata not an object", stFile(h, make([]byte, 8)), ErrHeader, "", at(h, "[]")})

	h = `{"w":{"dtype":"F32","shape":[2]}}`
	add(tc{"missing field", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, `{"dtype"`)})
	h = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8],"extra":1}}`
	add(tc{"extra field", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, `"extra"`)})
	h = `{"w":{"dtype":"F32","dtype":"F32","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"duplicate field", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, `"dtype":"F32","shape"`)})
	h = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"w":{"dtype":"F32","shape":[2],"data_offsets":[8,16]}}`
	add(tc{"duplicate tensor", stFile(h, make([]byte, 16)), ErrHeader, "w", at(h, `"w":{"dtype":"F32","shape":[2],"data_offsets":[8`)})
	h = `{"w":[]}`
	add(tc{"entry not an object", stFile(h, nil), ErrHeader, "w", at(h, "[]")})
	h = `{"w":{"dtype":5,"shape":[2],"data_offsets":[0,8]}}`
	add(tc{"dtype not a string", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "5")})

	h = `{"w":{"dtype":"F32","shape":[-1],"data_offsets":[0,8]}}`
	add(tc{"negative shape", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "-1")})
	h = `{"w":{"dtype":"F32","shape":[1.5],"data_offsets":[0,8]}}`
	add(tc{"non-integer shape", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "1.5")})
	h = `{"w":{"dtype":"F32","shape":[2e0],"data_offsets":[0,8]}}`
	add(tc{"exponent shape", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "2e0")})
	h = `{"w":{"dtype":"F32","shape":["2"],"data_offsets":[0,8]}}`
	add(tc{"string shape", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, `"2"`)})
	h = `{"w":{"dtype":"F32","shape":[99999999999999999999],"data_offsets":[0,8]}}`
	add(tc{"shape out of int64", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "9999")})
	h = `{"w":{"dtype":"F32","shape":[4294967296,4294967296],"data_offsets":[0,8]}}`
	add(tc{"shape product overflow", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "[4294967296")})
	h = `{"w":{"dtype":"F32","shape":[4611686018427387904],"data_offsets":[0,8]}}`
	add(tc{"shape bytes overflow", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "[4611686018427387904")})
	h = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8,16]}}`
	add(tc{"three offsets", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "[0,8,16]")})
	h = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[8]}}`
	add(tc{"one offset", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "[8]")})

	h = `{"a":{"dtype":"F32","shape":[1],"data_offsets":[0,4]},"b":{"dtype":"F32","shape":[1],"data_offsets":[8,12]}}`
	add(tc{"offsets with a hole", stFile(h, make([]byte, 12)), ErrOffsets, "b", data(h, 8)})
	h = `{"a":{"dtype":"F32","shape":[1],"data_offsets":[4,8]},"b":{"dtype":"F32","shape":[1],"data_offsets":[4,8]}}`
	add(tc{"hole at the start", stFile(h, make([]byte, 8)), ErrOffsets, "a", data(h, 4)})
	h = `{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"b":{"dtype":"F32","shape":[2],"data_offsets":[4,12]}}`
	add(tc{"overlapping offsets", stFile(h, make([]byte, 12)), ErrOffsets, "b", data(h, 4)})
	h = `{"w":{"dtype":"F32","shape":[1],"data_offsets":[8,4]}}`
	add(tc{"reversed offsets", stFile(h, make([]byte, 8)), ErrOffsets, "w", data(h, 8)})
	h = `{"w":{"dtype":"F32","shape":[3],"data_offsets":[0,8]}}`
	add(tc{"size not shape times dtype", stFile(h, make([]byte, 8)), ErrOffsets, "w", data(h, 0)})
	h = `{"w":{"dtype":"f32","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"dtype not a dtype name", stFile(h, make([]byte, 8)), ErrDType, "w", at(h, `"f32"`)})
	h = `{"w":{"dtype":"","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"empty dtype", stFile(h, make([]byte, 8)), ErrDType, "w", at(h, `""`)})
	h = `{"w":{"dtype":"F7 ","shape":[2],"data_offsets":[0,8]}}`
	add(tc{"dtype with a space", stFile(h, make([]byte, 8)), ErrDType, "w", at(h, `"F7 "`)})
	h = `{"w":{"dtype":"F7","shape":[2],"data_offsets":[0,0]}}`
	add(tc{"unknown dtype, elements but no bytes", stFile(h, nil), ErrOffsets, "w", data(h, 0)})
	h = `{"w":{"dtype":"F7","shape":[0],"data_offsets":[0,4]}}`
	add(tc{"unknown dtype, bytes but no elements", stFile(h, make([]byte, 4)), ErrOffsets, "w", data(h, 0)})
	h = `{"a":{"dtype":"F7","shape":[3],"data_offsets":[0,4]},"b":{"dtype":"U8","shape":[1],"data_offsets":[5,6]}}`
	add(tc{"unknown dtype, hole after it", stFile(h, make([]byte, 6)), ErrOffsets, "b", data(h, 5)})
	h = `{"w":{"dtype":"F7","shape":[4294967296,4294967296],"data_offsets":[0,8]}}`
	add(tc{"unknown dtype, shape overflow", stFile(h, make([]byte, 8)), ErrHeader, "w", at(h, "[4294967296")})
	add(tc{"trailing bytes", stFile(entry, make([]byte, 12)), ErrOffsets, "", data(entry, 8)})
	h = `{}`
	add(tc{"bytes but no tensors", stFile(h, []byte{1}), ErrOffsets, "", data(h, 0)})

	for _, c := range tests {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "bad.safetensors", c.file)
			ie := openFailure(t, path, c.sentinel, path, c.tensor)
			assert.Equal(t, c.offset, ie.Offset)
			msg := ie.Error()
			assert.Contains(t, msg, fmt.Sprintf("byte %d: ", c.offset))
			if c.tensor != "" {
				assert.Contains(t, msg, fmt.Sprintf("tensor %q", c.tensor))
			} else {
				assert.NotContains(t, msg, ": tensor ")
			}
			assert.Equal(t, strings.ToLower(c.sentinel.Error()), c.sentinel.Error())
		})
	}
}

func TestOpenMissingFile(t *testing.T) {
	path := t.TempDir() + "/absent.safetensors"
	_, err := Open(path)
	var ie *InputError
	require.ErrorAs(t, err, &ie)
	assert.Equal(t, path, ie.File)
	assert.Equal(t, int64(-1), ie.Offset)
	assert.ErrorIs(t, err, os.ErrNotExist)
	assert.Equal(t, path+": open: no such file or directory", err.Error())
}

// A dtype this package does not know is accepted when its offsets are
// consistent: its byte length comes from data_offsets, Walk returns its
// bytes unchanged, and it cannot be decoded for ternarization.
func TestOpenUnknownDType(t *testing.T) {
	header := `{"a":{"dtype":"F4_PACKED","shape":[3],"data_offsets":[0,2]},` +
		`"b":{"dtype":"U8","shape":[2],"data_offsets":[2,4]},` +
		`"c":{"dtype":"X9","shape":[0],"data_offsets":[4,4]}}`
	data := []byte{0xAB, 0x0C, 5, 6}
	path := writeTemp(t, "u.safetensors", stFile(header, data))
	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	require.Len(t, s.Tensors, 3)
	a, b, c := s.Tensors[0], s.Tensors[1], s.Tensors[2]
	assert.Equal(t, "F4_PACKED", a.DType)
	assert.Equal(t, int64(2), a.Length, "length from the offsets")
	assert.Equal(t, int64(3), a.NumElements())
	assert.False(t, a.KnownDType())
	assert.False(t, a.Ternarizable())
	assert.True(t, b.KnownDType())
	assert.Equal(t, int64(0), c.Length)
	got, _ := walkAll(t, s)
	assert.Equal(t, data[:2], got["a"])
	assert.Equal(t, data[2:], got["b"])
	err = a.DecodeWeights(got["a"], make([]float32, 3))
	assert.ErrorIs(t, err, ErrDType)
	assert.Contains(t, err.Error(), `tensor "a"`)
}
