package verify

import (
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/pack"
)

// requantize shares a tensor's work between goroutines as pack does and
// gives the one-goroutine trits, result and bytes for any worker count.
func TestRequantizeSplit(t *testing.T) {
	old := convert.SplitMinElements
	convert.SplitMinElements = 1 << 10
	t.Cleanup(func() { convert.SplitMinElements = old })
	rng := rand.New(rand.NewPCG(27, 28))
	const rows, cols = 9, 1003
	w := testweights.Gaussian(rng, rows*cols)
	for _, g := range []convert.Granularity{convert.PerTensor, {Kind: convert.GranRow}} {
		for _, order := range []convert.SumOrder{convert.SumBlocked16, convert.SumStrided16, convert.SumSequential} {
			r := convert.DefaultRecipe()
			r.Sum = order
			want := make([]int8, len(w))
			q, err := convert.Ternarize(w, cols, g, r, want)
			require.NoError(t, err)
			for _, workers := range []int{1, 2, 3, 7} {
				for _, codec := range pack.Codecs {
					b := redoBuffers{workers: workers, gate: convert.NewGate(workers)}
					fresh, got, err := b.requantize(convert.Float32Weights(w), cols, g, r, codec)
					require.NoError(t, err)
					require.Equal(t, want, fresh, "%s %v %s %d", codec, g, order, workers)
					require.Equal(t, q, got, "%s %v %s %d", codec, g, order, workers)
					if codec != pack.Entropy {
						require.Equal(t, codec.Encode(nil, want), b.encoded, "%s %v", codec, g)
					}
				}
			}
		}
	}
}

// An artifact with a tensor above convert.SplitMinElements verifies
// against its source with any worker count, under the new sum order and
// the older ones.
func TestAgainstLargeTensor(t *testing.T) {
	if testing.Short() {
		t.Skip("packs a 4 Mi-element tensor")
	}
	dir := t.TempDir()
	rows, cols := 2048, 2051
	rng := rand.New(rand.NewPCG(29, 30))
	bf := make([]byte, 2*rows*cols)
	for i, v := range testweights.Gaussian(rng, rows*cols) {
		b := math.Float32bits(v) >> 16
		bf[2*i], bf[2*i+1] = byte(b), byte(b>>8)
	}
	src := filepath.Join(dir, "big.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "big.w", DType: "BF16", Shape: []int64{int64(rows), int64(cols)}, Data: bf},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	for _, order := range []convert.SumOrder{convert.SumBlocked16, convert.SumStrided16, convert.SumSequential} {
		r := convert.DefaultRecipe()
		r.Sum = order
		art := filepath.Join(dir, string(order)+pack.Extension)
		_, err := pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: r, Workers: 2})
		require.NoError(t, err)
		for _, workers := range []int{1, 2, 3} {
			rep, err := Run(art, Options{Source: s, Workers: workers})
			require.NoError(t, err)
			require.True(t, rep.OK(), "%s workers %d: %+v", order, workers, rep.Failures())
			c, ok := rep.Find(CheckRequantize, "big.w")
			require.True(t, ok)
			require.True(t, c.OK)
		}
	}
}
