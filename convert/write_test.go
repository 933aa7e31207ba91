package convert

import (
	"encoding/binary"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestWriteFileLayout(t *testing.T) {
	tensors := []WriteTensor{
		{Name: "z", DType: "U8", Shape: []int64{3}, Data: []byte{1, 2, 3}},
		{Name: "a", DType: "F16", Shape: []int64{1, 2}, Data: []byte{0x00, 0x3c, 0x00, 0xc0}},
		{Name: "e", DType: "F32", Shape: []int64{0}, Data: nil},
	}
	tests := []struct {
		name     string
		metadata map[string]string
	}{
		{"no metadata", nil},
		{"empty metadata", map[string]string{}},
		{"metadata", map[string]string{"purpose": "test", "é": "ü"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "out.safetensors")
			require.NoError(t, WriteFile(path, tensors, tc.metadata))
			file, err := os.ReadFile(path)
			require.NoError(t, err)
			// Format description: 8-byte little-endian header length, header
			// padded with spaces (to a multiple of 8 by common practice).
			n := binary.LittleEndian.Uint64(file)
			assert.Zero(t, n%8, "header length %d", n)
			assert.Equal(t, []byte{1, 2, 3, 0x00, 0x3c, 0x00, 0xc0}, file[8+n:], "data section follows the header")

			s, err := Open(path)
			require.NoError(t, err)
			defer s.Close()
			assert.Equal(t, tc.metadata, s.Metadata)
			// Tensors keep the given order, offsets contiguous from 0.
			var names []string
			pos := int64(8 + n)
			for _, tn := range s.Tensors {
				names = append(names, tn.Name)
				assert.Equal(t, pos, tn.Offset, tn.Name)
				pos += tn.Length
			}
			assert.Equal(t, []string{"z", "a", "e"}, names)
			assert.Equal(t, int64(len(file)), pos)
			data, _ := walkAll(t, s)
			assert.Equal(t, []byte{1, 2, 3}, data["z"])
			assert.Equal(t, []byte{0x00, 0x3c, 0x00, 0xc0}, data["a"])
			assert.Empty(t, data["e"])

			info, err := os.Stat(path)
			require.NoError(t, err)
			assert.Equal(t, os.FileMode(0o644), info.Mode().Perm())
		})
	}
}

// Invalid tensors are refused before anything is written: no file at the
// destination, no temporary file left beside it, an existing file untouched.
func TestWriteFileRejectsAndLeavesNothing(t *testing.T) {
	tests := []struct {
		name     string
		tensors  []WriteTensor
		meta     map[string]string
		sentinel error
	}{
		{"data too short", []WriteTensor{{Name: "w", DType: "F32", Shape: []int64{2}, Data: make([]byte, 4)}}, nil, ErrOffsets},
		{"data too long", []WriteTensor{{Name: "w", DType: "U8", Shape: []int64{}, Data: make([]byte, 2)}}, nil, ErrOffsets},
		{"unknown dtype", []WriteTensor{{Name: "w", DType: "F7", Shape: []int64{1}, Data: make([]byte, 1)}}, nil, ErrDType},
		{"negative shape", []WriteTensor{{Name: "w", DType: "U8", Shape: []int64{-1}, Data: nil}}, nil, ErrHeader},
		{"shape overflow", []WriteTensor{{Name: "w", DType: "F32", Shape: []int64{1 << 62}, Data: nil}}, nil, ErrHeader},
		{"duplicate name", []WriteTensor{
			{Name: "w", DType: "U8", Shape: []int64{1}, Data: []byte{1}},
			{Name: "w", DType: "U8", Shape: []int64{1}, Data: []byte{1}},
		}, nil, ErrHeader},
		{"reserved name", []WriteTensor{{Name: "__metadata__", DType: "U8", Shape: []int64{1}, Data: []byte{1}}}, nil, ErrHeader},
		{"name not UTF-8", []WriteTensor{{Name: "w\xff", DType: "U8", Shape: []int64{1}, Data: []byte{1}}}, nil, ErrHeader},
		{"metadata not UTF-8", nil, map[string]string{"k": "\xfe"}, ErrHeader},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			fresh := filepath.Join(dir, "fresh.safetensors")
			err := WriteFile(fresh, tc.tensors, tc.meta)
			assert.ErrorIs(t, err, tc.sentinel)
			assert.Contains(t, err.Error(), fresh)
			_, statErr := os.Stat(fresh)
			assert.ErrorIs(t, statErr, os.ErrNotExist)

			existing := filepath.Join(dir, "existing.safetensors")
			require.NoError(t, os.WriteFile(existing, []byte("keep"), 0o644))
			assert.ErrorIs(t, WriteFile(existing, tc.tensors, tc.meta), tc.sentinel)
			kept, err := os.ReadFile(existing)
			require.NoError(t, err)
			assert.Equal(t, []byte("keep"), kept)

			entries, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Len(t, entries, 1, "only the pre-existing file remains")
		})
	}
}

// A failure after the temporary file exists (here: the destination is a
// non-empty directory, so the rename fails) removes the temporary file.
func TestWriteFileRenameFailureCleansUp(t *testing.T) {
	dir := t.TempDir()
	dst := filepath.Join(dir, "taken")
	require.NoError(t, os.MkdirAll(filepath.Join(dst, "inside"), 0o755))
	err := WriteFile(dst, []WriteTensor{{Name: "w", DType: "U8", Shape: []int64{1}, Data: []byte{1}}}, nil)
	require.Error(t, err)
	assert.Contains(t, err.Error(), dst)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 1)
	assert.Equal(t, "taken", entries[0].Name())
}

// A file streamed through Create in pieces of any size has the same bytes
// as WriteFile gives for the same tensors.
func TestCreateStreamsLikeWriteFile(t *testing.T) {
	big := make([]byte, 3000)
	for i := range big {
		big[i] = byte(i * 13)
	}
	tensors := []WriteTensor{
		{Name: "a", DType: "BF16", Shape: []int64{10, 150}, Data: big},
		{Name: "none", DType: "F32", Shape: []int64{0}},
		{Name: "b", DType: "U8", Shape: []int64{5}, Data: []byte{1, 2, 3, 4, 5}},
	}
	meta := map[string]string{"scenario": "stream"}
	dir := t.TempDir()
	whole := filepath.Join(dir, "whole.safetensors")
	require.NoError(t, WriteFile(whole, tensors, meta))
	want, err := os.ReadFile(whole)
	require.NoError(t, err)

	var specs []TensorSpec
	var data []byte
	for _, wt := range tensors {
		specs = append(specs, TensorSpec{Name: wt.Name, DType: wt.DType, Shape: wt.Shape})
		data = append(data, wt.Data...)
	}
	for _, piece := range []int{1, 7, 1000, len(data)} {
		path := filepath.Join(dir, fmt.Sprintf("streamed-%d.safetensors", piece))
		w, err := Create(path, specs, meta)
		require.NoError(t, err)
		for rest := data; len(rest) > 0; {
			n := min(piece, len(rest))
			got, err := w.Write(rest[:n])
			require.NoError(t, err)
			require.Equal(t, n, got)
			rest = rest[n:]
		}
		_, statErr := os.Stat(path)
		require.ErrorIs(t, statErr, os.ErrNotExist, "nothing at the destination before Close")
		require.NoError(t, w.Close())
		got, err := os.ReadFile(path)
		require.NoError(t, err)
		require.Equal(t, want, got, "piece size %d", piece)
		require.Error(t, w.Close(), "second Close")
	}
}

// Writing more or fewer bytes than the tensors hold fails at Write or
// Close, and leaves nothing at the destination and no temporary file.
func TestCreateWrongDataLength(t *testing.T) {
	specs := []TensorSpec{{Name: "w", DType: "F32", Shape: []int64{2}}}
	tests := []struct {
		name     string
		writes   [][]byte
		sentinel error
	}{
		{"too few", [][]byte{make([]byte, 7)}, ErrTruncated},
		{"none", nil, ErrTruncated},
		{"too many", [][]byte{make([]byte, 5), make([]byte, 4)}, ErrOffsets},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, "w.safetensors")
			w, err := Create(path, specs, nil)
			require.NoError(t, err)
			var writeErr error
			for _, p := range tc.writes {
				if _, err := w.Write(p); err != nil {
					writeErr = err
				}
			}
			closeErr := w.Close()
			require.ErrorIs(t, closeErr, tc.sentinel)
			if tc.sentinel == ErrOffsets {
				require.ErrorIs(t, writeErr, ErrOffsets)
			}
			assert.Contains(t, closeErr.Error(), path)
			entries, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Empty(t, entries)
		})
	}
	_, err := Create(filepath.Join(t.TempDir(), "x"), []TensorSpec{{Name: "w", DType: "F7", Shape: []int64{1}}}, nil)
	require.ErrorIs(t, err, ErrDType)
}
