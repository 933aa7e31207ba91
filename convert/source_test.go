package convert

import (
	"encoding/hex"
	"errors"
	"os"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// Published BLAKE3 test vector (from memory): the hash of the empty input
// begins af1349b9f5f9a1a6.
func TestBLAKE3EmptyVector(t *testing.T) {
	sum := blake3.Sum256(nil)
	assert.Equal(t, "af1349b9f5f9a1a6", hex.EncodeToString(sum[:8]))
}

func TestWalkHashes(t *testing.T) {
	big := make([]byte, 3*4096+17) // spans several BLAKE3 chunks
	for i := range big {
		big[i] = byte(i * 7)
	}
	tests := []struct {
		name    string
		tensors []WriteTensor
	}{
		{"no tensors", nil},
		{"one scalar", []WriteTensor{{Name: "s", DType: "F32", Shape: []int64{}, Data: []byte{0, 0, 0x80, 0x3f}}}},
		{"mixed", []WriteTensor{
			{Name: "big", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
			{Name: "zero", DType: "F16", Shape: []int64{0}, Data: nil},
			{Name: "small", DType: "I16", Shape: []int64{2}, Data: []byte{1, 2, 3, 4}},
		}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			path := t.TempDir() + "/h.safetensors"
			require.NoError(t, WriteFile(path, tc.tensors, map[string]string{"k": "v"}))
			whole, err := os.ReadFile(path)
			require.NoError(t, err)

			s, err := Open(path)
			require.NoError(t, err)
			defer s.Close()
			data, sums := walkAll(t, s)
			// Per-file hash: blake3.Sum256 of the whole file.
			assert.Equal(t, blake3.Sum256(whole), s.Files[0].BLAKE3)
			require.Len(t, data, len(tc.tensors))
			for _, wt := range tc.tensors {
				want := wt.Data
				if want == nil {
					want = []byte{}
				}
				assert.Equal(t, want, data[wt.Name], wt.Name)
				// Per-tensor hash: blake3.Sum256 of the tensor's bytes.
				assert.Equal(t, blake3.Sum256(wt.Data), sums[wt.Name], wt.Name)
			}

			// A second Walk gives the same file hash.
			s.Files[0].BLAKE3 = [32]byte{}
			walkAll(t, s)
			assert.Equal(t, blake3.Sum256(whole), s.Files[0].BLAKE3)
		})
	}
}

func TestWalkCallbackErrorUnchanged(t *testing.T) {
	path := t.TempDir() + "/c.safetensors"
	require.NoError(t, WriteFile(path, []WriteTensor{
		{Name: "a", DType: "U8", Shape: []int64{1}, Data: []byte{1}},
		{Name: "b", DType: "U8", Shape: []int64{1}, Data: []byte{2}},
	}, nil))
	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	stop := errors.New("stop here")
	var seen []string
	err = s.Walk(func(tn *Tensor, _ []byte, _ [32]byte) error {
		seen = append(seen, tn.Name)
		return stop
	})
	assert.Same(t, stop, err)
	assert.Equal(t, []string{"a"}, seen)
	assert.Equal(t, [32]byte{}, s.Files[0].BLAKE3, "no file hash after an incomplete walk")
}

// A file that changes between Open and Walk gives an *InputError naming the
// file, the tensor and the offset where the bytes run out.
func TestWalkFileChangedAfterOpen(t *testing.T) {
	tensors := []WriteTensor{
		{Name: "a", DType: "U8", Shape: []int64{4}, Data: []byte{1, 2, 3, 4}},
		{Name: "b", DType: "U8", Shape: []int64{4}, Data: []byte{5, 6, 7, 8}},
	}
	tests := []struct {
		name     string
		change   func(path string, size int64) error
		sentinel error
		tensor   string
		offset   func(s *Source) int64
	}{
		{"truncated", func(p string, size int64) error { return os.Truncate(p, size-2) }, ErrTruncated, "b",
			func(s *Source) int64 { return s.Tensors[1].Offset + 2 }},
		{"grown", func(p string, size int64) error { return os.Truncate(p, size+3) }, ErrOffsets, "",
			func(s *Source) int64 { return s.Files[0].Size }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			path := t.TempDir() + "/w.safetensors"
			require.NoError(t, WriteFile(path, tensors, nil))
			s, err := Open(path)
			require.NoError(t, err)
			defer s.Close()
			require.NoError(t, tc.change(path, s.Files[0].Size))
			err = s.Walk(func(*Tensor, []byte, [32]byte) error { return nil })
			assert.ErrorIs(t, err, tc.sentinel)
			var ie *InputError
			require.ErrorAs(t, err, &ie)
			assert.Equal(t, path, ie.File)
			assert.Equal(t, tc.tensor, ie.Tensor)
			assert.Equal(t, tc.offset(s), ie.Offset)
		})
	}
}

func TestCloseTwiceAndWalkAfterClose(t *testing.T) {
	path := t.TempDir() + "/x.safetensors"
	require.NoError(t, WriteFile(path, nil, nil))
	s, err := Open(path)
	require.NoError(t, err)
	require.NoError(t, s.Close())
	require.NoError(t, s.Close())
	err = s.Walk(func(*Tensor, []byte, [32]byte) error { return nil })
	var ie *InputError
	require.ErrorAs(t, err, &ie)
	assert.Equal(t, path, ie.File)
}
