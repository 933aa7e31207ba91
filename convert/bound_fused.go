package convert

import (
	"math"
	"sort"
	"sync"
)

// BoundTracker finds what TernaryBoundExcessSplit finds while the trits
// are being made, a run at a time, while the weights and trits of each run
// are in cache, instead of in a pass of its own over the whole tensor. A
// run's 32-element block maxima are taken as it comes; only the block that
// holds a group's largest is scanned again, element by element, at the
// end. Whatever the runs' lengths and alignment, the result is the largest
// excess of each group and the first index attaining it, as the separate
// pass gives it, bit for bit.
type BoundTracker struct {
	w      weights
	scales []float32
	size   int

	mu     sync.Mutex
	ranges []*boundRange
}

// boundRange is what one range of runs (one goroutine's) found: per group
// it touched, in order, its block with the largest maximum.
type boundRange struct {
	start, pos int
	bad        bool // a run reached past the groups the scales describe
	groups     []boundBest
	c          boundConsts
	ck         int // the group c is for, −1 for none
}

// boundBest is a group's first block attaining the largest maximum met so
// far, [block, end), with its trits, or block −1 when no element had an
// excess above −Inf.
type boundBest struct {
	k          int
	best       float64
	block, end int
	trits      [boundBlock]int8
}

// NewBoundTracker returns a tracker of the bound of the weights ws against
// scales, groups of groupSize elements, or nil when the scales and group
// size do not cover the tensor exactly (the separate pass then decides).
func NewBoundTracker(ws Weights, scales []float32, groupSize int) *BoundTracker {
	n := ws.w.len()
	if groupSize < 0 || (n == 0 && len(scales) != 1) || (n > 0 && (groupSize == 0 || len(scales) != n/groupSize || n%groupSize != 0)) {
		return nil
	}
	return &BoundTracker{w: ws.w, scales: scales, size: groupSize}
}

// Range returns the function that takes the trits of [start, end) in
// order, a run at a time, from one goroutine; ranges may run at the same
// time.
func (t *BoundTracker) Range(start, end int) func(trits []int8) {
	r := &boundRange{start: start, pos: start, ck: -1}
	t.mu.Lock()
	t.ranges = append(t.ranges, r)
	t.mu.Unlock()
	var maxima [boundChunk]float64
	return func(trits []int8) {
		for len(trits) > 0 && !r.bad {
			if r.pos+len(trits) > t.w.len() {
				r.bad = true
				return
			}
			k := r.pos / t.size // t.size > 0: the tensor has elements
			n := min(len(trits), (k+1)*t.size-r.pos, boundChunk*boundBlock)
			if k != r.ck {
				r.c, r.ck = newBoundConsts(t.scales[k]), k
				r.groups = append(r.groups, boundBest{k: k, best: math.Inf(-1), block: -1})
			}
			g := &r.groups[len(r.groups)-1]
			for j, m := range blockMaxima(t.w.slice(r.pos, r.pos+n), trits[:n], &r.c, &maxima) {
				if m > g.best {
					g.best, g.block = m, r.pos+j*boundBlock
					g.end = min(g.block+boundBlock, r.pos+n)
					copy(g.trits[:], trits[j*boundBlock:g.end-r.pos])
				}
			}
			r.pos += n
			trits = trits[n:]
		}
	}
}

// Result is the largest excess relative to the scale and its index, as
// TernaryBoundExcessSplit(ws, trits, scales, groupSize) returns them, where
// trits are those handed to the ranges (which need not be kept: the
// tracker keeps those of the blocks it scans again); ok is false when the
// runs did not cover the tensor, each element once.
func (t *BoundTracker) Result() (excess float64, at int, ok bool) {
	sort.Slice(t.ranges, func(i, j int) bool { return t.ranges[i].start < t.ranges[j].start })
	pos := 0
	best := make([]boundBest, len(t.scales))
	for k := range best {
		best[k] = boundBest{best: math.Inf(-1), block: -1}
	}
	for _, r := range t.ranges {
		if r.bad || r.start != pos {
			return 0, -1, false
		}
		pos = r.pos
		for _, g := range r.groups {
			if b := &best[g.k]; g.block >= 0 && (b.block < 0 || g.best > b.best) {
				*b = g
			}
		}
	}
	if pos != t.w.len() {
		return 0, -1, false
	}
	var worst excessTracker
	for k, sc := range t.scales {
		b := &best[k]
		e, a := math.Inf(-1), -1
		if b.block >= 0 {
			c := newBoundConsts(sc)
			e, a = boundScan(t.w.slice(b.block, b.end), b.trits[:b.end-b.block], &c)
			if a >= 0 {
				a += b.block
			}
		}
		worst.note(e, a, float64(sc))
	}
	excess, at = worst.result()
	return excess, at, true
}
