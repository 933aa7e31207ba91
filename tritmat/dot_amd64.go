package tritmat

import "golang.org/x/sys/cpu"

// useAVX2 selects dotAVX2.
var useAVX2 = cpu.X86.HasAVX2

// dotAVX2 is DotPortable over n elements, n a positive multiple of 32.
//
//go:noescape
func dotAVX2(a, b *int8, n int) int32

func dot(a, b []int8) int32 {
	n := len(a) &^ 31
	if !useAVX2 || n == 0 {
		return DotPortable(a, b)
	}
	return dotAVX2(&a[0], &b[0], n) + DotPortable(a[n:], b[n:])
}
