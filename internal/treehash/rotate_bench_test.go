package treehash

import "testing"

// go test -bench Rotate ./internal/treehash: the tree hash of one core
// with and without the AVX-512VL rotate, alternating.
func BenchmarkRotate(b *testing.B) {
	data := input(4 << 20)
	saved := haveRotate
	defer func() { haveRotate = saved }()
	for _, r := range []bool{false, true, false, true} {
		name := "avx2"
		if r {
			name = "avx512vl-rotate"
		}
		b.Run(name, func(b *testing.B) {
			if r && !saved {
				b.Skip("no AVX-512VL on this CPU")
			}
			haveRotate = r
			b.SetBytes(int64(len(data)))
			for b.Loop() {
				Subtree(data, 0)
			}
		})
	}
}

// BenchmarkColdPieces: pieces of 4 MiB of 256 MiB, in order, mostly not
// in cache (as a file's bytes first read are).
func BenchmarkColdPieces(b *testing.B) {
	const piece = 4 << 20
	data := input(256 << 20)
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		for o := 0; o < len(data); o += piece {
			Subtree(data[o:o+piece], uint64(o/ChunkSize))
		}
	}
}
