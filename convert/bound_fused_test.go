package convert

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/stretchr/testify/require"
)

// feedBound hands the trits to a tracker in ranges cut at cuts, each in
// runs of random length through one scratch buffer overwritten after each
// run (as the quantize pass reuses its block), the ranges in shuffled
// order.
func feedBound(rng *rand.Rand, bt *BoundTracker, trits []int8, cuts []int) {
	order := rng.Perm(len(cuts) - 1)
	buf := make([]int8, 1500)
	for _, j := range order {
		add := bt.Range(cuts[j], cuts[j+1])
		for pos := cuts[j]; pos < cuts[j+1]; {
			n := min(1+rng.IntN(len(buf)), cuts[j+1]-pos)
			add(buf[:copy(buf[:n], trits[pos:pos+n])])
			for i := range buf {
				buf[i] = 7
			}
			pos += n
		}
	}
}

// The bound found run by run, while the trits are made, is the separate
// pass's: the same excess, bit for bit, and the same first index, for any
// run lengths, range cuts and groups, with NaN, ±Inf, wrong trits and
// ties across runs and ranges, for float32 and BF16 weights.
func TestBoundTrackerMatchesSeparatePass(t *testing.T) {
	rng := rand.New(rand.NewPCG(71, 72))
	n := 96 * 130
	for trial := range 40 {
		w, trits := boundCase(rng, n, 0.05, trial%2 == 1)
		if trial%4 == 2 { // equal excesses far apart: the first one counts
			for i := range w {
				w[i], trits[i] = 0, 0
			}
			for _, i := range []int{n - 3, 4000, 77, 9000} {
				w[i] = 1.4
			}
			w[5] = -0.0
		}
		raw := make([]byte, 2*n)
		for i, v := range w {
			binary.LittleEndian.PutUint16(raw[2*i:], uint16(math.Float32bits(v)>>16))
		}
		for _, ws := range []Weights{Float32Weights(w), BF16Weights(raw)} {
			for _, groupSize := range []int{n, 96, 130, 32, 1} {
				scales := make([]float32, n/groupSize)
				for k := range scales {
					scales[k] = 0.05 * (1 + float32(k%5)/8)
				}
				want, wantAt := TernaryBoundExcessSplit(ws, trits, scales, groupSize, Split{Workers: 1})
				cuts := []int{0}
				for len(cuts) < 1+rng.IntN(5) {
					cuts = append(cuts, rng.IntN(n))
				}
				cuts = append(cuts, n)
				slices.Sort(cuts)
				bt := NewBoundTracker(ws, scales, groupSize)
				require.NotNil(t, bt)
				feedBound(rng, bt, trits, cuts)
				got, at, ok := bt.Result()
				require.True(t, ok)
				require.Equal(t, wantAt, at, "trial %d group %d", trial, groupSize)
				require.Equal(t, math.Float64bits(want), math.Float64bits(got), "trial %d group %d", trial, groupSize)
			}
		}
	}
}

// A tracker whose scales do not cover the tensor is not made; one whose
// runs left a gap or overlapped says so, and the separate pass decides.
func TestBoundTrackerIncomplete(t *testing.T) {
	w := make([]float32, 100)
	trits := make([]int8, 100)
	ws := Float32Weights(w)
	require.Nil(t, NewBoundTracker(ws, make([]float32, 3), 30))
	require.Nil(t, NewBoundTracker(ws, make([]float32, 4), 30))
	require.Nil(t, NewBoundTracker(ws, make([]float32, 2), 0))
	require.NotNil(t, NewBoundTracker(Float32Weights(nil), []float32{1}, 0))

	bt := NewBoundTracker(ws, []float32{1, 1}, 50)
	bt.Range(0, 40)(trits[:40])
	bt.Range(50, 100)(trits[50:])
	_, _, ok := bt.Result()
	require.False(t, ok, "a gap")

	bt = NewBoundTracker(ws, []float32{1, 1}, 50)
	bt.Range(0, 60)(trits[:60])
	bt.Range(50, 100)(trits[50:])
	_, _, ok = bt.Result()
	require.False(t, ok, "an overlap")

	bt = NewBoundTracker(ws, []float32{1, 1}, 50)
	add := bt.Range(0, 100)
	add(trits)
	add(trits[:1]) // past the end
	_, _, ok = bt.Result()
	require.False(t, ok, "past the end")

	bt = NewBoundTracker(ws, []float32{1, 1}, 50)
	bt.Range(0, 100)(trits)
	_, at, ok := bt.Result()
	require.True(t, ok)
	require.Equal(t, 0, at)
}
