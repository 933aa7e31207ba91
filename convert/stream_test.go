package convert

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// Streaming tensor by tensor gives the same bytes as WriteFile.
func TestFileWriterMatchesWriteFile(t *testing.T) {
	dir := t.TempDir()
	tensors := []WriteTensor{
		{Name: "a", DType: "F16", Shape: []int64{1, 2}, Data: []byte{0x00, 0x3c, 0x00, 0xc0}},
		{Name: "e", DType: "F32", Shape: []int64{0}},
		{Name: "z", DType: "U8", Shape: []int64{3}, Data: []byte{1, 2, 3}},
	}
	meta := map[string]string{"k": "v"}
	whole := filepath.Join(dir, "whole.safetensors")
	require.NoError(t, WriteFile(whole, tensors, meta))

	streamed := filepath.Join(dir, "streamed.safetensors")
	layout := make([]WriteTensor, len(tensors))
	for i, tn := range tensors {
		layout[i] = WriteTensor{Name: tn.Name, DType: tn.DType, Shape: tn.Shape}
	}
	w, err := CreateFile(streamed, layout, meta)
	require.NoError(t, err)
	defer w.Abort()
	for _, tn := range tensors {
		require.NoError(t, w.WriteTensor(tn.Data))
	}
	require.NoError(t, w.Commit())

	a, err := os.ReadFile(whole)
	require.NoError(t, err)
	b, err := os.ReadFile(streamed)
	require.NoError(t, err)
	require.Equal(t, a, b)
}

func TestFileWriterRejects(t *testing.T) {
	layout := []WriteTensor{{Name: "w", DType: "F32", Shape: []int64{2}}}
	cases := []struct {
		name  string
		write [][]byte
		want  string
	}{
		{"wrong length", [][]byte{make([]byte, 4)}, `tensor "w"`},
		{"too few tensors", nil, "data for 0 of 1 tensors"},
		{"too many tensors", [][]byte{make([]byte, 8), nil}, "the header has 1"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, "out.safetensors")
			w, err := CreateFile(path, layout, nil)
			require.NoError(t, err)
			err = nil
			for _, d := range c.write {
				if err = w.WriteTensor(d); err != nil {
					break
				}
			}
			if err == nil {
				err = w.Commit()
			}
			require.ErrorIs(t, err, ErrOffsets)
			require.Contains(t, err.Error(), c.want)
			require.Contains(t, err.Error(), path)
			w.Abort()
			entries, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Empty(t, entries, "nothing left at the destination")
		})
	}
}
