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
