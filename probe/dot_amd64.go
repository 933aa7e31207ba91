package probe

import "golang.org/x/sys/cpu"

// useAVX2 selects dotLanesAVX2.
var useAVX2 = cpu.X86.HasAVX2

// dotLanesAVX2 is dotBulkPortable over n elements, n a positive multiple
// of 32: four 8-lane accumulators hold lanes 0-7, 8-15, 16-23, 24-31.
//
//go:noescape
func dotLanesAVX2(a, b *float32, n int, s *[dotLanes]float32)

func dotBulk(a, b []float32, s *[dotLanes]float32) int {
	n := len(a) &^ (dotLanes - 1)
	if !useAVX2 || n == 0 {
		return dotBulkPortable(a, b, s)
	}
	dotLanesAVX2(&a[0], &b[0], n, s)
	return n
}

// dot2LanesAVX2 is dotLanesAVX2 for two activation vectors sharing the
// weights w: s0 takes w·x0's lanes, s1 w·x1's.
//
//go:noescape
func dot2LanesAVX2(w, x0, x1 *float32, n int, s0, s1 *[dotLanes]float32)

func dotBulk2(w, x0, x1 []float32, s0, s1 *[dotLanes]float32) int {
	n := len(w) &^ (dotLanes - 1)
	if !useAVX2 || n == 0 {
		dotBulkPortable(w, x0, s0)
		return dotBulkPortable(w, x1, s1)
	}
	dot2LanesAVX2(&w[0], &x0[0], &x1[0], n, s0, s1)
	return n
}
