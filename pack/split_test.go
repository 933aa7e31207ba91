package pack

import (
	"bytes"
	"math"
	"math/rand/v2"
	"path/filepath"
	"strconv"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

// Trits written in ranges, the ranges at the same time and each in runs
// of any length, give the payload EncodeTensor writes for all of them, in
// every codec: ranges that start or end inside a digit byte, ranges
// shorter than a byte, and a tensor whose last byte is short.
func TestSplitEncoderConcatenates(t *testing.T) {
	rng := rand.New(rand.NewPCG(51, 52))
	for _, n := range []int{0, 1, 7, 19, 20, 21, 1000, 4099, 100_003} {
		trits := make([]int8, n)
		for i := range trits {
			trits[i] = int8(rng.IntN(3)) - 1
		}
		var counts convert.TritCounts
		counts.Count(trits)
		// cuts: a few random ones, and some a trit apart
		cuts := []int{0}
		for i := 0; i < 12 && n > 0; i++ {
			c := rng.IntN(n)
			cuts = append(cuts, c, min(n, c+1), min(n, c+3))
		}
		cuts = append(cuts, n)
		cuts = sortedUnique(cuts)
		for _, c := range WriterCodecs {
			want, wantCodec := c.EncodeTensor(nil, trits)
			e, err := NewSplitEncoder(c, n)
			require.NoError(t, err)
			var wg sync.WaitGroup
			for j := len(cuts) - 2; j >= 0; j-- { // the ranges out of order
				start, end := cuts[j], cuts[j+1]
				write := e.Range(start, end)
				seed := uint64(j)
				wg.Add(1)
				go func() {
					defer wg.Done()
					r := rand.New(rand.NewPCG(seed, 53))
					for pos := start; pos < end; {
						k := min(end-pos, 1+r.IntN(700))
						require.NoError(t, write(trits[pos:pos+k]))
						pos += k
					}
				}()
			}
			wg.Wait()
			got, gotCodec := e.Finish(counts)
			require.Equal(t, wantCodec, gotCodec, "n %d %s", n, c)
			require.True(t, bytes.Equal(want, got), "n %d %s cuts %v: %d bytes, want %d", n, c, cuts, len(got), len(want))
		}
	}
	e, err := NewSplitEncoder(Base3, 10)
	require.NoError(t, err)
	require.Error(t, e.Range(0, 4)(make([]int8, 5)), "a range takes no trits past its end")
}

func sortedUnique(v []int) []int {
	seen := map[int]bool{}
	var out []int
	for _, x := range v {
		if !seen[x] {
			seen[x] = true
			out = append(out, x)
		}
	}
	for i := range out {
		for j := i + 1; j < len(out); j++ {
			if out[j] < out[i] {
				out[i], out[j] = out[j], out[i]
			}
		}
	}
	return out
}

// A checkpoint with a tensor above convert.SplitMinElements, whose work is
// shared by the workers, gives the same artifact for 1, 2, 3 and 7 workers
// at tensor, row and group granularity in every codec; its trits and
// scales are those of convert.Ternarize on one goroutine.
func TestBuildLargeTensorSameForAnyWorkers(t *testing.T) {
	if testing.Short() {
		t.Skip("builds 36 artifacts of a 4 Mi-element tensor")
	}
	dir := t.TempDir()
	rows, cols := 2048, 2051 // 4200448 weights: rows and groups of 293 cut digit bytes
	require.GreaterOrEqual(t, rows*cols, convert.SplitMinElements)
	rng := rand.New(rand.NewPCG(54, 55))
	bf := make([]byte, 2*rows*cols)
	floats := make([]float32, rows*cols)
	for i, v := range testweights.Gaussian(rng, rows*cols) {
		b := math.Float32bits(v) >> 16
		bf[2*i], bf[2*i+1] = byte(b), byte(b>>8)
		floats[i] = math.Float32frombits(b << 16)
	}
	src := filepath.Join(dir, "big.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "big.w", DType: "BF16", Shape: []int64{int64(rows), int64(cols)}, Data: bf},
		{Name: "small.w", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	type setup struct {
		gran   string
		recipe convert.Recipe
	}
	setups := []setup{{"ternary", blockedRecipe()}, {"ternary:row", blockedRecipe()}, {"ternary:group:293", blockedRecipe()}, {"ternary:row", stridedRecipe()}}
	for _, st := range setups {
		for _, codec := range Codecs {
			if st.recipe.Sum != convert.SumBlocked16 && codec != Base3 {
				continue
			}
			name := st.gran + "/" + string(st.recipe.Sum) + "/" + string(codec)
			policy := mustPolicy(t, "big.w="+st.gran)
			var want []byte
			for _, workers := range []int{1, 2, 3, 7} {
				dst := filepath.Join(dir, "w"+strconv.Itoa(workers)+Extension)
				m, err := Build(s, dst, Options{Codec: codec, Recipe: st.recipe, Policy: policy, Workers: workers})
				require.NoError(t, err, name)
				got := readFile(t, dst)
				if want == nil {
					want = got
					checkBigTensor(t, dst, m, floats, cols, st.recipe, name)
					continue
				}
				require.Equal(t, want, got, "%s: %d workers", name, workers)
			}
		}
	}
}

// checkBigTensor holds big.w of the artifact at dst to convert.Ternarize.
func checkBigTensor(t *testing.T, dst string, m *manifest.Manifest, floats []float32, cols int, r convert.Recipe, name string) {
	t.Helper()
	a, err := Open(dst)
	require.NoError(t, err)
	defer a.Close()
	tn, err := a.Tensor("big.w")
	require.NoError(t, err)
	trits := make([]int8, len(floats))
	want, err := convert.Ternarize(floats, cols, *tn.Entry.Granularity, r, trits)
	require.NoError(t, err)
	got := make([]int8, len(floats))
	require.NoError(t, tn.DecodeTrits(got))
	require.Equal(t, trits, got, name)
	scales, err := tn.Scales()
	require.NoError(t, err)
	require.Equal(t, want.Scales, scales, name)
	require.Equal(t, want.Stats, *tn.Entry.Stats, name)
	require.Equal(t, want.Counts, *tn.Entry.Trits, name)
	require.Equal(t, m.Recipe, r)
}

// Any trits cut into any ranges, each written in runs of any length, give
// the payload EncodeTensor writes for all of them (data: a trit per byte;
// cuts: range lengths, one per byte, 0 meaning 1).
func FuzzSplitEncoder(f *testing.F) {
	f.Add([]byte{0, 1, 2, 2, 1, 0, 0, 0, 1, 2, 2}, []byte{3, 1, 4}, uint8(2), uint8(1))
	f.Add(make([]byte, 300), []byte{19, 21, 5, 0, 64}, uint8(7), uint8(0))
	f.Fuzz(func(t *testing.T, data, cuts []byte, step, codec uint8) {
		trits := make([]int8, len(data))
		for i, b := range data {
			trits[i] = int8(b%3) - 1
		}
		c := WriterCodecs[int(codec)%len(WriterCodecs)]
		e, err := NewSplitEncoder(c, len(trits))
		require.NoError(t, err)
		for start, i := 0, 0; start < len(trits); i++ {
			end := len(trits)
			if i < len(cuts) {
				end = min(end, start+max(1, int(cuts[i])))
			}
			write := e.Range(start, end)
			for pos := start; pos < end; {
				k := min(end-pos, 1+int(step))
				require.NoError(t, write(trits[pos:pos+k]))
				pos += k
			}
			start = end
		}
		var counts convert.TritCounts
		counts.Count(trits)
		got, gotCodec := e.Finish(counts)
		want, wantCodec := c.EncodeTensor(nil, trits)
		require.Equal(t, wantCodec, gotCodec)
		require.True(t, bytes.Equal(want, got), "%d bytes, want %d", len(got), len(want))
	})
}
