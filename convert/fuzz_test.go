package convert

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/zeebo/blake3"

	"ternkit/internal/alloccount"
)

// FuzzOpen feeds arbitrary bytes to Open and Walk: never a panic; every
// error is an *InputError wrapping a sentinel; Open allocates within a
// bound proportional to the input (a declared length never allocates more
// than the file holds); a file that opens walks cleanly, its tensors cover
// the data section, and the file hash is the BLAKE3 of the whole input.
// Parse → write → parse: a file that opens is written again by WriteFile
// and reopens with the same tensors, bytes and metadata.
func FuzzOpen(f *testing.F) {
	f.Add(stFile(`{}`, nil))
	f.Add(stFile(`{"__metadata__":{"a":"b"},"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`, make([]byte, 8)))
	f.Add(stFile(`{"a":{"dtype":"U8","shape":[],"data_offsets":[0,1]},"b":{"dtype":"BF16","shape":[0],"data_offsets":[1,1]}}`, []byte{1}))
	f.Add(stFile(`{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`, make([]byte, 4)))
	f.Add(stFile(`{"w":{"dtype":"F32","shape":[-1],"data_offsets":[0,8]}}`, make([]byte, 8)))
	f.Add(stFile(`{"w":{"dtype":"F32","shape":[4294967296,4294967296],"data_offsets":[0,8]}}`, nil))
	f.Add(stFile(`{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"b":{"dtype":"F32","shape":[2],"data_offsets":[4,12]}}`, make([]byte, 12)))
	f.Add(rawFile(1000, `{}`, nil))
	f.Add(rawFile(100_000_001, `{}`, nil))
	f.Add([]byte{1, 2, 3})

	f.Fuzz(func(t *testing.T, in []byte) {
		path := filepath.Join(t.TempDir(), "f.safetensors")
		if err := os.WriteFile(path, in, 0o644); err != nil {
			t.Fatal(err)
		}
		var s *Source
		var err error
		if n := alloccount.Bytes(func() { s, err = Open(path) }); n > openAllocBound(len(in)) {
			t.Fatalf("Open of %d bytes allocated %d bytes", len(in), n)
		}
		if err != nil {
			var ie *InputError
			if !errors.As(err, &ie) || ie.File != path {
				t.Fatalf("Open error is not an *InputError naming the file: %v", err)
			}
			if !errors.Is(err, ErrTruncated) && !errors.Is(err, ErrHeader) && !errors.Is(err, ErrOffsets) && !errors.Is(err, ErrDType) {
				t.Fatalf("Open error wraps no sentinel: %v", err)
			}
			return
		}
		defer s.Close()
		var data []byte
		var again []WriteTensor
		err = s.Walk(func(tn *Tensor, raw []byte, sum [32]byte) error {
			if int64(len(raw)) != tn.Length || sum != blake3.Sum256(raw) {
				t.Fatalf("tensor %q: %d bytes for length %d, or wrong sum", tn.Name, len(raw), tn.Length)
			}
			if tn.IsFloat() {
				dst := make([]float32, tn.NumElements())
				if err := DecodeFloat32(tn.DType, raw, dst); err != nil {
					t.Fatalf("tensor %q: %v", tn.Name, err)
				}
			}
			data = append(data, raw...)
			again = append(again, WriteTensor{Name: tn.Name, DType: tn.DType, Shape: tn.Shape, Data: bytes.Clone(raw)})
			return nil
		})
		if err != nil {
			t.Fatalf("Walk after a successful Open: %v", err)
		}
		if !bytes.HasSuffix(in, data) || s.Files[0].Size != int64(len(in)) {
			t.Fatal("tensors do not end the file")
		}
		if s.Files[0].BLAKE3 != blake3.Sum256(in) {
			t.Fatal("file hash differs from BLAKE3 of the input")
		}
		rewriteReopens(t, again, s.Metadata)
	})
}

// openAllocBound is what Open may allocate for an input of n bytes: the
// header once, its parsed entries (a JSON integer of one digit becomes an
// 8-byte int64, and slices grow by doubling) and a fixed allowance.
func openAllocBound(n int) uint64 { return 64*uint64(n) + 1<<20 }

// rewriteReopens writes tensors with WriteFile and checks that the file
// opens with the same tensors, in order, and the same metadata and bytes.
func rewriteReopens(t *testing.T, tensors []WriteTensor, metadata map[string]string) {
	t.Helper()
	for _, w := range tensors {
		if _, ok := dtypeSizes[w.DType]; !ok {
			return // WriteFile lays out known dtypes only
		}
	}
	path := filepath.Join(t.TempDir(), "again.safetensors")
	if err := WriteFile(path, tensors, metadata); err != nil {
		t.Fatalf("WriteFile of an opened file: %v", err)
	}
	s, err := Open(path)
	if err != nil {
		t.Fatalf("reopen: %v", err)
	}
	defer s.Close()
	if len(s.Metadata) != len(metadata) || len(s.Tensors) != len(tensors) {
		t.Fatalf("reopen: %d tensors and metadata %v, wrote %d and %v", len(s.Tensors), s.Metadata, len(tensors), metadata)
	}
	for k, v := range metadata {
		if s.Metadata[k] != v {
			t.Fatalf("reopen: metadata %q is %q, wrote %q", k, s.Metadata[k], v)
		}
	}
	i := 0
	err = s.Walk(func(tn *Tensor, raw []byte, _ [32]byte) error {
		w := tensors[i]
		if tn.Name != w.Name || tn.DType != w.DType || !slices.Equal(tn.Shape, w.Shape) || !bytes.Equal(raw, w.Data) {
			t.Fatalf("reopen: tensor %d is %q %s %v, wrote %q %s %v", i, tn.Name, tn.DType, tn.Shape, w.Name, w.DType, w.Shape)
		}
		i++
		return nil
	})
	if err != nil {
		t.Fatalf("reopen walk: %v", err)
	}
}
