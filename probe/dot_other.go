//go:build !amd64

package probe

func dotBulk(a, b []float32, s *[dotLanes]float32) int { return dotBulkPortable(a, b, s) }

func dotBulk2(w, x0, x1 []float32, s0, s1 *[dotLanes]float32) int {
	dotBulkPortable(w, x0, s0)
	return dotBulkPortable(w, x1, s1)
}
