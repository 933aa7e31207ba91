package convert

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"
)

// splitRun is what TernarizeSplit gives on workers goroutines: the trits,
// gathered by range, and the result.
func splitRun(t *testing.T, w Weights, cols int, g Granularity, r Recipe, workers int) ([]int8, Ternary) {
	t.Helper()
	trits := make([]int8, w.Len())
	var mu sync.Mutex
	covered := 0
	res, err := TernarizeSplit(w, cols, g, r, Split{Workers: workers, Gate: NewGate(workers), Range: func(start, end int) func([]int8) error {
		mu.Lock()
		covered += end - start
		mu.Unlock()
		pos := start
		return func(tr []int8) error {
			if pos+len(tr) > end {
				return fmt.Errorf("trits [%d, %d) past the range's end %d", pos, pos+len(tr), end)
			}
			pos += copy(trits[pos:end], tr)
			return nil
		}
	}})
	require.NoError(t, err)
	require.Equal(t, w.Len(), covered, "the ranges cover the tensor once")
	return trits, res
}

// One tensor shared by any number of goroutines gives the trits, scales,
// counts and statistics of the one-goroutine pass, bit for bit, at every
// granularity and sum order, BF16 and float32.
func TestTernarizeSplitSameForAnyWorkers(t *testing.T) {
	old := SplitMinElements
	SplitMinElements = 1 << 16
	t.Cleanup(func() { SplitMinElements = old })
	rng := rand.New(rand.NewPCG(41, 42))
	rows, cols := 5, SumBlock/4+24 // the tensor above SumBlock, with a tail block
	f := make([]float32, rows*cols)
	bf := make([]byte, 2*len(f))
	for i := range f {
		v := float32(rng.NormFloat64() * 0.02)
		bf[2*i], bf[2*i+1] = byte(math.Float32bits(v)>>16), byte(math.Float32bits(v)>>24)
		f[i] = math.Float32frombits(math.Float32bits(v) &^ 0xffff)
	}
	for _, gs := range []string{"tensor", "row", "group:8", "group:32771"} {
		g, err := ParseGranularity(gs)
		require.NoError(t, err)
		for _, order := range []SumOrder{SumBlocked16, SumStrided16, SumSequential} {
			if testing.Short() && order != SumBlocked16 {
				continue
			}
			r := DefaultRecipe()
			r.Sum = order
			want := make([]int8, len(f))
			ref, err := Ternarize(f, cols, g, r, want)
			require.NoError(t, err)
			for _, workers := range []int{1, 2, 3, 7} {
				name := gs + "/" + string(order)
				for _, w := range []Weights{Float32Weights(f), BF16Weights(bf)} {
					trits, res := splitRun(t, w, cols, g, r, workers)
					require.True(t, slices.Equal(want, trits), "%s workers %d: trits differ", name, workers)
					require.Equal(t, ref.Counts, res.Counts, name)
					require.Equal(t, ref.Stats, res.Stats, "%s workers %d", name, workers)
					require.Equal(t, ref.Exact, res.Exact, name)
					require.Len(t, res.Scales, len(ref.Scales))
					for k := range ref.Scales {
						require.Equal(t, math.Float32bits(ref.Scales[k]), math.Float32bits(res.Scales[k]), "%s scale %d", name, k)
					}
				}
			}
		}
	}
}

// For groups of at most SumBlock elements blocked16 is strided16: the same
// scales, trits and statistics (FORMAT.md, "Ternary groups").
func TestBlockedIsStridedUpToABlock(t *testing.T) {
	rng := rand.New(rand.NewPCG(43, 44))
	for _, shape := range [][2]int{{1, SumBlock}, {4, SumBlock / 4}, {3, 1000}, {7, 13}, {0, 16}} {
		rows, cols := shape[0], shape[1]
		w := make([]float32, rows*cols)
		for i := range w {
			w[i] = float32(rng.NormFloat64())
		}
		for _, gs := range []string{"tensor", "row"} {
			g, err := ParseGranularity(gs)
			require.NoError(t, err)
			for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
				out := map[SumOrder]Ternary{}
				trits := map[SumOrder][]int8{}
				for _, order := range []SumOrder{SumBlocked16, SumStrided16} {
					r := recipeWith(rule, TieHalfEven)
					r.Sum = order
					trits[order] = make([]int8, len(w))
					q, err := Ternarize(w, cols, g, r, trits[order])
					require.NoError(t, err)
					out[order] = q
					gamma, err := Absmean(w, order)
					require.NoError(t, err)
					out[order+"/gamma"] = Ternary{Stats: Stats{Cosine: gamma}}
				}
				require.Equal(t, out[SumStrided16], out[SumBlocked16], "%v %s %s", shape, gs, rule)
				require.Equal(t, out[SumStrided16+"/gamma"], out[SumBlocked16+"/gamma"], "%v", shape)
				require.Equal(t, trits[SumStrided16], trits[SumBlocked16])
			}
		}
	}
}

// An error from one range's emit stops the work and is returned; a NaN is
// reported at its element whichever goroutine finds it.
func TestTernarizeSplitErrors(t *testing.T) {
	old := SplitMinElements
	SplitMinElements = 1 << 10
	t.Cleanup(func() { SplitMinElements = old })
	w := make([]float32, 3*SumBlock)
	for i := range w {
		w[i] = float32(i%7) - 3
	}
	boom := errors.New("disk full")
	_, err := TernarizeSplit(Float32Weights(w), SumBlock, Granularity{Kind: GranRow}, DefaultRecipe(), Split{Workers: 3,
		Range: func(start, end int) func([]int8) error {
			return func([]int8) error {
				if start > 0 {
					return boom
				}
				return nil
			}
		}})
	require.ErrorIs(t, err, boom)
	w[2*SumBlock+5] = float32(math.NaN())
	w[2*SumBlock+9] = float32(math.Inf(1))
	_, err = TernarizeSplit(Float32Weights(w), SumBlock, Granularity{Kind: GranTensor}, DefaultRecipe(), Split{Workers: 3,
		Range: func(int, int) func([]int8) error { return func([]int8) error { return nil } }})
	var nf *NonFiniteError
	require.ErrorAs(t, err, &nf)
	require.Equal(t, 2*SumBlock+5, nf.Index)
}

// The bound check shared by goroutines finds the one-goroutine result: the
// same largest excess and the first element attaining it, also when equal
// maxima lie in different blocks of one group.
func TestTernaryBoundExcessSplit(t *testing.T) {
	old := SplitMinElements
	SplitMinElements = 1 << 12
	t.Cleanup(func() { SplitMinElements = old })
	n := 3*SumBlock + 96 // 96 × 32769
	w := make([]float32, n)
	trits := make([]int8, n)
	rng := rand.New(rand.NewPCG(45, 46))
	for i := range w {
		w[i] = float32(rng.NormFloat64() * 0.3)
		trits[i] = int8(rng.IntN(3)) - 1
	}
	tied := slices.Clone(w)
	tiedTrits := make([]int8, n)
	for i := range tied {
		tied[i] = 0
	}
	tied[2*SumBlock+7], tied[SumBlock+5] = 1.4, 1.4 // equal excesses, 0.9 of the scale
	tied[9] = float32(math.NaN())                   // never counts
	for _, c := range []struct {
		name  string
		w     []float32
		trits []int8
	}{{"gaussian", w, trits}, {"tied", tied, tiedTrits}} {
		require.Zero(t, n%32769)
		for _, groupSize := range []int{n, 32769, 96} {
			scales := make([]float32, n/groupSize)
			for k := range scales {
				scales[k] = 1 + float32(k%3)/8
			}
			want, wantAt := TernaryBoundExcess(c.w, c.trits, scales, groupSize)
			for _, workers := range []int{1, 2, 3, 7} {
				got, at := TernaryBoundExcessSplit(Float32Weights(c.w), c.trits, scales, groupSize, Split{Workers: workers, Gate: NewGate(workers)})
				require.Equal(t, wantAt, at, "%s group %d workers %d", c.name, groupSize, workers)
				require.Equal(t, math.Float64bits(want), math.Float64bits(got), "%s group %d workers %d", c.name, groupSize, workers)
			}
		}
	}
	_, at := TernaryBoundExcessSplit(Float32Weights(tied), tiedTrits, []float32{1}, n, Split{Workers: 3})
	require.Equal(t, SumBlock+5, at, "the first of equal excesses")
}

// Absmean under blocked16, worked by hand: 2^53 and 2^29 in lanes 0 and 4
// of the first block and ones in lanes 0 and 1 of the second sum to
// B_0 = 2^53 + 2^29 and B_1 = 2, so A = 2^53 + 2^29 + 2 exactly, where one
// set of sixteen lanes over the whole row (strided16) rounds both ones
// away (2^53 + 1 and 2^53 + 2^29 + 1 tie to even, downwards).
func TestAbsmeanBlockedWorked(t *testing.T) {
	w := make([]float32, 2*SumBlock)
	w[0], w[4], w[SumBlock], w[SumBlock+1] = 0x1p53, 0x1p29, 1, 1
	m := float64(len(w)) // 2^21: the division is exact
	got, err := Absmean(w, SumBlocked16)
	require.NoError(t, err)
	require.Equal(t, (0x1p53+0x1p29+2)/m, got)
	got, err = Absmean(w, SumStrided16)
	require.NoError(t, err)
	require.Equal(t, (0x1p53+0x1p29)/m, got)
	// the same gamma decides the scale of Ternarize (reciprocal form: the
	// float32 of gamma, 2^32 + 2^8 + 2^-20, rounds up to 2^32 + 2^9)
	q, err := Ternarize(w, len(w), PerTensor, DefaultRecipe(), make([]int8, len(w)))
	require.NoError(t, err)
	require.Equal(t, float32(0x1p32+0x1p9), q.Scales[0])
}
