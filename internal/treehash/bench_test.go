package treehash

import (
	"testing"

	"github.com/zeebo/blake3"
)

// go test -bench . ./internal/treehash: the tree path against the plain
// one-pass hash of github.com/zeebo/blake3 on the same bytes.
func BenchmarkSum256(b *testing.B) {
	data := input(64 << 20)
	b.Run("zeebo-one-pass", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			blake3.Sum256(data)
		}
	})
	for _, w := range []int{1, 2} {
		b.Run("tree-workers-"+string(rune('0'+w)), func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			for b.Loop() {
				Sum256(data, w)
			}
		})
	}
}
