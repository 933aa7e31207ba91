package convert

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"github.com/zeebo/blake3"
)

// FuzzOpen feeds arbitrary bytes to Open and Walk: never a panic; every
// error is an *InputError wrapping a sentinel; a file that opens walks
// cleanly, its tensors cover the data section, and the file hash is the
// BLAKE3 of the whole input.
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
		s, err := Open(path)
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
	})
}
