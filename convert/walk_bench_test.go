package convert

import (
	"path/filepath"
	"strconv"
	"testing"
)

// BenchmarkWalkOrderedHash walks a 96 MiB file of one 64 MiB tensor and
// small ones with a work function that does nothing: the cost of reading
// and hashing the source (file hash and span identities), per source byte.
// Compare with b3sum of the same bytes; it reports, it asserts nothing.
func BenchmarkWalkOrderedHash(b *testing.B) {
	path := filepath.Join(b.TempDir(), "bench.safetensors")
	var ts []WriteTensor
	big := make([]byte, 64<<20)
	for i := range big {
		big[i] = byte(i>>3 ^ i)
	}
	ts = append(ts, u8("big", big...))
	for i := range 32 {
		ts = append(ts, u8("small."+strconv.Itoa(i), big[:1<<20+i]...))
	}
	if err := WriteFile(path, ts, nil); err != nil {
		b.Fatal(err)
	}
	s, err := Open(path)
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	b.SetBytes(s.Files[0].Size)
	for _, workers := range []int{1, 2} {
		b.Run("workers="+strconv.Itoa(workers), func(b *testing.B) {
			b.SetBytes(s.Files[0].Size)
			for b.Loop() {
				err := WalkOrdered(s, WalkOptions{Workers: workers},
					func(int, *Tensor, []byte) (struct{}, error) { return struct{}{}, nil },
					func(*Tensor, SourceID, struct{}) error { return nil })
				if err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
