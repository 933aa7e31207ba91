package convert

import "math"

// TernaryBoundExcess checks the per-element bound of RoundClip against the
// dequantization scale s of each element's group: for |w| ≤ 1.5·s,
// |w − s·t| ≤ s/2; beyond it, |w − s·t| = |w| − s. It returns the largest
// amount, relative to s, by which an element breaks the bound (≤ 0 when
// none does) and that element's index, the first to attain it (−1 for an
// empty tensor). Elements whose excess is NaN never count.
func TernaryBoundExcess(w []float32, trits []int8, scales []float32, groupSize int) (float64, int) {
	return TernaryBoundExcessOf(Float32Weights(w), trits, scales, groupSize)
}

// TernaryBoundExcessOf is TernaryBoundExcess over weights of any form
// (BF16 read in place, without a float32 copy).
func TernaryBoundExcessOf(ws Weights, trits []int8, scales []float32, groupSize int) (float64, int) {
	w := ws.w
	var worst excessTracker
	for g, sc := range scales {
		lo, hi := g*groupSize, min((g+1)*groupSize, w.len())
		if lo >= hi {
			continue
		}
		best, at := groupBoundExcess(w.slice(lo, hi), trits[lo:hi], sc)
		if at >= 0 {
			at += lo
		}
		worst.note(best, at, float64(sc))
	}
	return worst.result()
}

// boundBlock is the run of elements whose largest excess the block pass
// finds; only the block that holds a group's largest is scanned again,
// element by element, for the first index attaining it.
const boundBlock = 32

// boundChunk is the number of blocks whose maxima one call gathers.
const boundChunk = 32

// boundConsts are the constants of one group, as the vector kernel reads
// them.
type boundConsts struct {
	s      float64 // the scale
	half   float64 // s/2
	beyond float64 // 1.5·s: above it the bound is an equality
	sc     float32 // the scale in float32, for s·t
}

func newBoundConsts(sc float32) boundConsts {
	s := float64(sc)
	return boundConsts{s: s, half: s / 2, beyond: 1.5 * s, sc: sc}
}

// groupBoundExcess is the largest excess over the bound in one group (not
// yet relative to the scale) and the first index attaining it, or −Inf and
// −1 when no element has an excess above −Inf.
func groupBoundExcess(w weights, trits []int8, sc float32) (float64, int) {
	c := newBoundConsts(sc)
	if !useAVX2 { // without the kernel, one pass is quickest
		return boundScan(w, trits, &c)
	}
	n := w.len()
	best, block := math.Inf(-1), -1
	var maxima [boundChunk]float64
	for b := 0; b < n; b += boundChunk * boundBlock {
		e := min(b+boundChunk*boundBlock, n)
		for k, m := range blockMaxima(w.slice(b, e), trits[b:e], &c, &maxima) {
			if m > best {
				best, block = m, b+k*boundBlock
			}
		}
	}
	if block < 0 {
		return best, -1
	}
	e := min(block+boundBlock, n)
	best, at := boundScan(w.slice(block, e), trits[block:e], &c)
	return best, block + at
}

// blockMaxima writes to out the largest excess of each run of boundBlock
// elements of w (at most boundChunk runs; the last may be shorter) and
// returns those maxima: NaN excesses are left out, −Inf stands for none,
// and −0 reads as +0, so that every order of comparison gives the same bits.
func blockMaxima(w weights, trits []int8, c *boundConsts, out *[boundChunk]float64) []float64 {
	trits = trits[:w.len()]
	n := 0
	if useAVX2 {
		if n = w.len() &^ (boundBlock - 1); n > 0 {
			if w.bf16 != nil {
				blockMaximaBF16AVX2(&w.bf16[0], &trits[0], n, c, out)
			} else {
				blockMaximaAVX2(&w.f32[0], &trits[0], n, c, out)
			}
		}
	}
	blockMaximaGo(w.slice(n, w.len()), trits[n:], c, out[n/boundBlock:])
	return out[:(w.len()+boundBlock-1)/boundBlock]
}

// blockMaximaGo is blockMaxima without vector units.
func blockMaximaGo(w weights, trits []int8, c *boundConsts, out []float64) {
	for k := 0; k*boundBlock < w.len(); k++ {
		m := math.Inf(-1)
		for i := k * boundBlock; i < min((k+1)*boundBlock, w.len()); i++ {
			if e := boundExcess(w.at(i), trits[i], c); e > m {
				m = e
			}
		}
		out[k] = m + 0 // −0 becomes +0
	}
}

// boundScan is the largest excess in w and the first index attaining it
// (−1 when none is above −Inf).
func boundScan(w weights, trits []int8, c *boundConsts) (float64, int) {
	best, at := math.Inf(-1), -1
	for i := range w.len() {
		if e := boundExcess(w.at(i), trits[i], c); e > best {
			best, at = e, i
		}
	}
	return best, at
}

// boundExcess is one element's excess over its bound, computed without a
// branch on the data: beyond 1.5·s the bound is an equality. The explicit
// conversions keep each product rounded apart from its sum, as the vector
// kernel computes it.
func boundExcess(v float32, t int8, c *boundConsts) float64 {
	a := math.Abs(float64(v))
	d := math.Abs(float64(v) - float64(c.sc*float32(t)))
	beyond := float64(b2i(a > c.beyond))
	return float64((d-c.half)*(1-beyond)) + float64(math.Abs(d-(a-c.s))*beyond)
}
