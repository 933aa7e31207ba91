package convert

import (
	"math"
	"sync"
	"sync/atomic"
)

// Gate bounds the goroutines doing CPU work at once: each holds one of its
// slots while it works. A nil *Gate bounds nothing.
type Gate struct{ slots chan struct{} }

// NewGate returns a gate of n slots (at least one).
func NewGate(n int) *Gate { return &Gate{slots: make(chan struct{}, max(1, n))} }

// Acquire takes a slot, waiting for one.
func (g *Gate) Acquire() {
	if g != nil {
		g.slots <- struct{}{}
	}
}

// Release gives back a slot taken by Acquire.
func (g *Gate) Release() {
	if g != nil {
		<-g.slots
	}
}

// acquireUnless takes a slot, or gives up when stop is closed first.
func (g *Gate) acquireUnless(stop <-chan struct{}) bool {
	if g == nil {
		select {
		case <-stop:
			return false
		default:
			return true
		}
	}
	select {
	case g.slots <- struct{}{}:
		return true
	case <-stop:
		return false
	}
}

// Split says how TernarizeSplit shares one tensor's work.
type Split struct {
	// Workers is the number of goroutines that may work on the tensor, the
	// caller's included; at most 1, or a tensor of fewer than
	// SplitMinElements weights, runs on the caller's goroutine alone.
	Workers int
	// Gate, when set, is the slot every goroutine but the caller's takes
	// before each range of work: the caller is expected to hold one.
	Gate *Gate
	// Range returns where the trits of the elements [start, end) go, in
	// order, a run of at most a few hundred at a time (as TernarizeStream's
	// emit). The ranges are disjoint and cover the tensor; each is called
	// once, from the goroutine that works on it, and ranges run at the same
	// time. An error from an emit function stops its range and is returned
	// (the first in tensor order).
	Range func(start, end int) func(trits []int8) error
}

// SplitMinElements is the number of weights from which TernarizeSplit
// shares a tensor between goroutines (a variable for tests).
var SplitMinElements = 4 << 20

// TernarizeSplit is TernarizeStream with the work on one tensor shared by
// s.Workers goroutines: the gamma pass by pieces (whole groups, or the
// SumBlock blocks of a group under SumBlocked16), the quantize pass by
// ranges of pieces. Every sum is taken piece by piece and the pieces are
// combined in tensor order, so the result is the same for any worker count.
// A tensor at tensor granularity under SumStrided16 or SumSequential is one
// piece: its work is not shared.
func TernarizeSplit(w Weights, cols int, g Granularity, r Recipe, s Split) (Ternary, error) {
	return ternarizeSplit(w.w, cols, g, r, s, nil)
}

// ternarize is Ternarize on the caller's goroutine, the trits stored in
// out.all (a Split without Range).
func ternarize(all weights, cols int, g Granularity, r Recipe, out *tritOut) (Ternary, error) {
	return ternarizeSplit(all, cols, g, r, Split{Workers: 1}, out.all)
}

// workPlan is how a tensor's work divides: groups of size elements, each of
// per pieces (SumBlock elements each but the last, under SumBlocked16).
type workPlan struct {
	n, groups, size, per int
}

// piece returns the group of piece i and its elements [lo, hi).
func (p workPlan) piece(i int) (k, lo, hi int) {
	k = i / p.per
	lo = k*p.size + (i%p.per)*SumBlock
	hi = min(lo+SumBlock, (k+1)*p.size)
	if p.per == 1 {
		hi = (k + 1) * p.size
	}
	return k, lo, hi
}

// ranges cuts the pieces into runs of about n / (4·workers) elements (at
// least SplitMinElements / 8), as piece index bounds: range j is
// [b[j], b[j+1]).
func (p workPlan) ranges(workers int) []int {
	pieces := p.groups * p.per
	if workers <= 1 || p.n < SplitMinElements {
		return []int{0, pieces}
	}
	target := max(SplitMinElements/8, (p.n+4*workers-1)/(4*workers))
	b := []int{0}
	start := 0
	for i := range pieces {
		if _, _, hi := p.piece(i); hi-start >= target && i+1 < pieces {
			b = append(b, i+1)
			start = hi
		}
	}
	return append(b, pieces)
}

// run calls work for each range 0 … n−1, on up to workers goroutines: the
// caller's, and others that take a slot of gate for each range.
func run(n, workers int, gate *Gate, work func(j int)) {
	if workers <= 1 || n <= 1 {
		for j := range n {
			work(j)
		}
		return
	}
	var next atomic.Int64
	take := func() (int, bool) {
		j := int(next.Add(1) - 1)
		return j, j < n
	}
	stop := make(chan struct{})
	var wg sync.WaitGroup
	var faults FaultRelay // the bytes may be a mapped file (WalkOrdered)
	for range min(workers, n) - 1 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for gate.acquireUnless(stop) {
				j, ok := take()
				if ok {
					faults.Run(func() { work(j) })
				}
				gate.Release()
				if !ok {
					return
				}
			}
		}()
	}
	for j, ok := take(); ok; j, ok = take() {
		work(j)
	}
	close(stop)
	wg.Wait()
	faults.Raise()
}

// rangeTotals are the quantize pass's totals of one range that add in any
// order: counts and the largest error.
type rangeTotals struct {
	tritSum, clipped int64
	maxErr           float64
	err              error
}

// ternarizeSplit does the work of Ternarize, TernarizeStream and
// TernarizeSplit: trits go to s.Range, or to trits when s.Range is nil.
func ternarizeSplit(all weights, cols int, g Granularity, r Recipe, s Split, trits []int8) (Ternary, error) {
	n := all.len()
	if err := r.Validate(); err != nil {
		return Ternary{}, err
	}
	size, err := g.GroupSize(n, cols)
	if err != nil {
		return Ternary{}, err
	}
	groups := 0
	if size > 0 {
		groups = n / size
	}
	if g.Kind == GranTensor {
		groups, size = 1, n // one scale, even for an empty tensor
	}
	order := r.sumOrder()
	p := workPlan{n: n, groups: groups, size: size, per: 1}
	if order == SumBlocked16 && size > SumBlock {
		p.per = (size + SumBlock - 1) / SumBlock
	}
	bounds := p.ranges(s.Workers)
	nr := len(bounds) - 1

	// the gamma pass: A and Σw² of each piece, then of each group, adding
	// the pieces in order from +0 (for one piece, its own sums)
	pieces := groups * p.per
	gammas := make([]float64, groups)
	squares := make([]float64, groups)
	// a group of one piece reads its sums from its own index only before
	// writing its gamma and Σw² there: the arrays can be shared
	psum, psq := gammas, squares
	if p.per > 1 {
		psum, psq = make([]float64, pieces), make([]float64, pieces)
	}
	run(nr, s.Workers, s.Gate, func(j int) {
		for i := bounds[j]; i < bounds[j+1]; i++ {
			_, lo, hi := p.piece(i)
			psum[i], psq[i] = pieceSums(all.slice(lo, hi), order)
		}
	})
	quants := make([]quantizer, groups)
	exact := true
	for k := range quants {
		var sum, sq float64
		for i := k * p.per; i < (k+1)*p.per; i++ {
			sum += psum[i]
			sq += psq[i]
		}
		part := all.slice(k*size, (k+1)*size)
		if math.IsNaN(sum) || math.IsInf(sum, 0) {
			if err := firstNonFinite(part, k*size); err != nil {
				return Ternary{}, err
			}
		}
		gamma := 0.0
		if size > 0 {
			gamma = sum / float64(size)
		}
		gammas[k], squares[k] = gamma, sq
		quants[k] = newQuantizer(r, gamma)
		if exact {
			c, ok := exactScale(part)
			exact = ok || gamma == 0
			if ok {
				quants[k] = exactQuantizer(c)
			}
		}
	}
	if !exact {
		// The exact scales apply only when the whole tensor is exact.
		for k := range quants {
			quants[k] = newQuantizer(r, gammas[k])
		}
	}

	// the quantize pass: Σ|w| over nonzero trits and the nonzero count of
	// each piece (in psum, whose sums, and gammas, are no longer needed,
	// and pnz), the rest per range
	pabs, pnz := psum, make([]int64, pieces)
	totals := make([]rangeTotals, nr)
	lanes := order != SumSequential
	run(nr, s.Workers, s.Gate, func(j int) {
		out := &tritOut{all: trits}
		if s.Range != nil {
			_, start, _ := p.piece(bounds[j])
			end := n
			if bounds[j+1] < pieces {
				_, end, _ = p.piece(bounds[j+1])
			}
			out.buf, out.emit = make([]int8, laneBlock), s.Range(start, end)
		}
		t := &totals[j]
		for i := bounds[j]; i < bounds[j+1]; i++ {
			k, lo, hi := p.piece(i)
			q := quants[k]
			gt := q.quantizeGroup(all.slice(lo, hi), out, lo, lanes)
			if out.err != nil {
				t.err = out.err
				return
			}
			pabs[i], pnz[i] = gt.absNonzero, gt.nonzero
			t.tritSum += gt.tritSum
			t.clipped += gt.clipped
			t.maxErr = max(t.maxErr, gt.maxErr)
		}
	})
	var sums groupSums
	for _, t := range totals {
		if t.err != nil {
			return Ternary{}, t.err
		}
		sums.tritSum += t.tritSum
		sums.clipped += t.clipped
		sums.maxErr = max(sums.maxErr, t.maxErr)
	}
	res := Ternary{Scales: make([]float32, groups), Exact: exact}
	for k, q := range quants {
		res.Scales[k] = q.scale
		gt := groupTotals{sumSq: squares[k]}
		for i := k * p.per; i < (k+1)*p.per; i++ {
			gt.absNonzero += pabs[i]
			gt.nonzero += pnz[i]
		}
		sums.add(gt, q.scale)
	}
	res.Counts = sums.counts(int64(n))
	res.Stats = sums.stats(int64(n), exact)
	return res, nil
}

// TernaryBoundExcessSplit is TernaryBoundExcessOf with the work shared by
// s.Workers goroutines as TernarizeSplit shares it (s.Range is not used):
// a group above SumBlock elements in blocks of SumBlock, whose largest
// excesses (and first indices) are taken in order, then the groups in
// order, so the result is the one-goroutine result for any count.
func TernaryBoundExcessSplit(ws Weights, trits []int8, scales []float32, groupSize int, s Split) (float64, int) {
	w := ws.w
	n := w.len()
	p := workPlan{n: n, groups: len(scales), size: groupSize, per: 1}
	if groupSize > SumBlock {
		p.per = (groupSize + SumBlock - 1) / SumBlock
	}
	bounds := p.ranges(s.Workers)
	pieces := p.groups * p.per
	best, at := make([]float64, pieces), make([]int, pieces)
	run(len(bounds)-1, s.Workers, s.Gate, func(j int) {
		for i := bounds[j]; i < bounds[j+1]; i++ {
			k, lo, hi := p.piece(i)
			lo, hi = min(lo, n), min(hi, n)
			best[i], at[i] = math.Inf(-1), -1
			if lo < hi {
				best[i], at[i] = groupBoundExcess(w.slice(lo, hi), trits[lo:hi], scales[k])
				if at[i] >= 0 {
					at[i] += lo
				}
			}
		}
	})
	var worst excessTracker
	for k, sc := range scales {
		b, a := math.Inf(-1), -1
		for i := k * p.per; i < (k+1)*p.per; i++ {
			if at[i] >= 0 && (a < 0 || best[i] > b) {
				b, a = best[i], at[i]
			}
		}
		worst.note(b, a, float64(sc))
	}
	return worst.result()
}
