//go:build !amd64

package probe

func dotBulk(a, b []float32, s *[dotLanes]float32) int { return dotBulkPortable(a, b, s) }
