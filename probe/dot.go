package probe

// dotLanes is the number of float32 partial sums of dotF32.
const dotLanes = 32

// dotF32 is Σ a[i]·b[i] over len(a) elements in float32: element i is
// added to lane i mod 32 in increasing i (each product rounded to float32
// before the addition, never fused), then the lanes are added pairwise
// (lane k with lane k + 16, then k + 8, k + 4, k + 2, k + 1). The order is
// fixed so that the vector version gives the same bits.
func dotF32(a, b []float32) float32 {
	b = b[:len(a)]
	var s [dotLanes]float32
	return dotFinish(a, b, dotBulk(a, b, &s), &s)
}

// dot2F32 is (dotF32(w, x0), dotF32(w, x1)), bit for bit, with each weight
// loaded once.
func dot2F32(w, x0, x1 []float32) (float32, float32) {
	x0, x1 = x0[:len(w)], x1[:len(w)]
	var s0, s1 [dotLanes]float32
	n := dotBulk2(w, x0, x1, &s0, &s1)
	return dotFinish(w, x0, n, &s0), dotFinish(w, x1, n, &s1)
}

// dotFinish adds the elements from n on to their lanes, then the lanes.
func dotFinish(a, b []float32, n int, s *[dotLanes]float32) float32 {
	for i := n; i < len(a); i++ {
		s[i%dotLanes] += float32(a[i] * b[i])
	}
	for w := dotLanes / 2; w >= 1; w /= 2 {
		for k := range w {
			s[k] += s[k+w]
		}
	}
	return s[0]
}

// dotBulkPortable adds the products of the first n = len(a) rounded down
// to a multiple of 32 elements into the lanes and returns n.
func dotBulkPortable(a, b []float32, s *[dotLanes]float32) int {
	n := len(a) &^ (dotLanes - 1)
	for i := 0; i < n; i += dotLanes {
		x, y := a[i:i+dotLanes], b[i:i+dotLanes]
		for k := range dotLanes {
			s[k] += float32(x[k] * y[k])
		}
	}
	return n
}
