package convert

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"
)

// The numpy reference (testdata/reference/absmean.py, written from the
// recipe in pack/FORMAT.md) agrees trit for trit and scale for scale, bit
// for bit, over random tensors at every granularity, both scale rules, both
// tie rules and both sum orders.
func TestTernarizeAgreesWithNumpy(t *testing.T) {
	requireNumpy(t)
	py := numpyPython
	script, err := filepath.Abs("../testdata/reference/absmean.py")
	require.NoError(t, err)
	rng := rand.New(rand.NewPCG(21, 22))
	type tensor struct {
		name       string
		rows, cols int
		w          []float32
	}
	gaussian := func(rows, cols int, std float64) []float32 {
		w := make([]float32, rows*cols)
		for i := range w {
			w[i] = float32(rng.NormFloat64() * std)
		}
		return w
	}
	// exact ties: every row is a permutation of ±0.5, ±1.5 (gamma = 1), so
	// w/gamma is exactly ±0.5 or ±1.5
	ties := make([]float32, 16*8)
	for r := 0; r < 16; r++ {
		row := []float32{0.5, -0.5, 1.5, -1.5, 0.5, -0.5, 1.5, -1.5}
		rng.Shuffle(len(row), func(i, j int) { row[i], row[j] = row[j], row[i] })
		copy(ties[r*8:], row)
	}
	// a sum whose pairing decides gamma in float32: lanes 0, 1 and 3 hold
	// t0 = 2^53 + 2^29 (from w0 and w4), t1 = t3 = 1; the documented
	// (t0 + t2) + (t1 + t3) is 2^53 + 2^29 + 2, while pairing t0 with t1
	// first loses both ones (2^53 + 2^29 + 1 ties to even, downwards). Over
	// 16 or 32 weights that is just above, or exactly on, the midpoint
	// between two float32 values of gamma, which rounds up, or to even
	// (down). Row 1 is zero, so the tensor sum is the same.
	pairing := make([]float32, 2*16)
	pairing[0], pairing[4], pairing[1], pairing[3] = 0x1p53, 0x1p29, 1, 1
	tensors := []tensor{
		{"pairing", 2, 16, pairing},
		{"gaussian", 96, 256, gaussian(96, 256, 0.02)},
		{"wide", 8, 4096, gaussian(8, 4096, 1)},
		{"tiny", 4, 64, gaussian(4, 64, 1e-7)}, // gamma below epsilon
		{"ties", 16, 8, ties},
	}
	dir := t.TempDir()
	for _, tn := range tensors {
		in := filepath.Join(dir, tn.name+".f32")
		b := make([]byte, 4*len(tn.w))
		for i, v := range tn.w {
			binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(v))
		}
		require.NoError(t, os.WriteFile(in, b, 0o644))
		for _, gs := range []string{"tensor", "row", "group:8", "group:64"} {
			g, err := ParseGranularity(gs)
			require.NoError(t, err)
			if _, err := g.GroupSize(len(tn.w), tn.cols); err != nil {
				continue
			}
			for _, rule := range []ScaleRule{ScaleReciprocal, ScaleQuotient} {
				for _, tie := range []TieRule{TieHalfEven, TieHalfAway} {
					for _, order := range []SumOrder{SumStrided16, SumSequential} {
						r := recipeWith(rule, tie)
						r.Sum = order
						name := tn.name + "/" + gs + "/" + string(rule) + "/" + string(tie) + "/" + string(order)
						outT, outS := filepath.Join(dir, "t"), filepath.Join(dir, "s")
						cmd := exec.Command(py, script, in, strconv.Itoa(tn.rows), strconv.Itoa(tn.cols), gs,
							string(rule), strconv.FormatFloat(r.Epsilon, 'g', -1, 64), string(tie), string(order), outT, outS)
						out, err := cmd.CombinedOutput()
						require.NoError(t, err, "%s: %s", name, out)
						refTrits, err := os.ReadFile(outT)
						require.NoError(t, err)
						refScalesRaw, err := os.ReadFile(outS)
						require.NoError(t, err)

						trits := make([]int8, len(tn.w))
						q, err := Ternarize(tn.w, tn.cols, g, r, trits)
						require.NoError(t, err, name)
						require.Len(t, refScalesRaw, 4*len(q.Scales), name)
						for k, s := range q.Scales {
							ref := math.Float32frombits(binary.LittleEndian.Uint32(refScalesRaw[4*k:]))
							require.Equal(t, math.Float32bits(ref), math.Float32bits(s), "%s: scale %d is %v, numpy %v", name, k, s, ref)
						}
						for i := range trits {
							require.Equal(t, int8(refTrits[i]), trits[i], "%s: trit %d", name, i)
						}
					}
				}
			}
		}
	}
}

// The numpy reference agrees bit for bit under the blocked16 order too, on
// groups above SumBlock (2^20) elements, with and without a tail block
// shorter than the others, and below it. The "blockpair" tensor decides
// gamma by the order: row 0 holds 2^53 and 2^29 in lanes 0 and 4 of its
// first block and ones in lanes 0 and 1 of its second. Summed by blocks,
// A = (2^53 + 2^29) + 2, exact; summed in sixteen lanes over the whole
// row, lane 0 takes 2^53 + 1, which ties to even (down), and the final 1
// is lost the same way, so A = 2^53 + 2^29. Over 2^21 (a row) or 2^22
// weights (the tensor), the first gamma lies just above a midpoint between
// two float32 values and rounds up, the second on it and rounds to even
// (down): the two orders give different reciprocal-form scales, which the
// test requires.
func TestBlockedAgreesWithNumpy(t *testing.T) {
	requireNumpy(t)
	if testing.Short() {
		t.Skip("writes tensors of 2^22 weights")
	}
	script, err := filepath.Abs("../testdata/reference/absmean.py")
	require.NoError(t, err)
	rng := rand.New(rand.NewPCG(23, 24))
	pair := make([]float32, 2<<21)
	pair[0], pair[4], pair[SumBlock], pair[SumBlock+1] = 0x1p53, 0x1p29, 1, 1
	tail := make([]float32, 3*(SumBlock+1000))
	for i := range tail {
		tail[i] = float32(rng.NormFloat64() * 0.02)
	}
	type tensor struct {
		name       string
		rows, cols int
		w          []float32
	}
	dir := t.TempDir()
	for _, tn := range []tensor{{"blockpair", 2, 2 << 20, pair}, {"tail", 3, SumBlock + 1000, tail}} {
		in := filepath.Join(dir, tn.name+".f32")
		b := make([]byte, 4*len(tn.w))
		for i, v := range tn.w {
			binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(v))
		}
		require.NoError(t, os.WriteFile(in, b, 0o644))
		for _, gs := range []string{"tensor", "row", "group:524288", "group:8"} {
			g, err := ParseGranularity(gs)
			require.NoError(t, err)
			if _, err := g.GroupSize(len(tn.w), tn.cols); err != nil || (tn.name == "blockpair" && gs == "group:8") {
				continue // (groups of 8 in one block: the "tail" tensor has them)
			}
			for _, rt := range []struct {
				rule ScaleRule
				tie  TieRule
			}{{ScaleReciprocal, TieHalfEven}, {ScaleQuotient, TieHalfAway}} {
				if tn.name == "blockpair" && rt.rule != ScaleReciprocal {
					continue // its sums decide only the reciprocal form's scale
				}
				scales := map[SumOrder][]float32{}
				for _, order := range []SumOrder{SumBlocked16, SumStrided16} {
					r := recipeWith(rt.rule, rt.tie)
					r.Sum = order
					name := tn.name + "/" + gs + "/" + string(rt.rule) + "/" + string(order)
					outT, outS := filepath.Join(dir, "t"), filepath.Join(dir, "s")
					cmd := exec.Command(numpyPython, script, in, strconv.Itoa(tn.rows), strconv.Itoa(tn.cols), gs,
						string(rt.rule), strconv.FormatFloat(r.Epsilon, 'g', -1, 64), string(rt.tie), string(order), outT, outS)
					out, err := cmd.CombinedOutput()
					require.NoError(t, err, "%s: %s", name, out)
					refTrits, err := os.ReadFile(outT)
					require.NoError(t, err)
					refScales, err := os.ReadFile(outS)
					require.NoError(t, err)
					trits := make([]int8, len(tn.w))
					q, err := Ternarize(tn.w, tn.cols, g, r, trits)
					require.NoError(t, err, name)
					require.Len(t, refScales, 4*len(q.Scales), name)
					for k, s := range q.Scales {
						ref := binary.LittleEndian.Uint32(refScales[4*k:])
						require.Equal(t, ref, math.Float32bits(s), "%s: scale %d is %v, numpy %v", name, k, s, math.Float32frombits(ref))
					}
					require.Equal(t, refTrits, int8Bytes(trits), name)
					scales[order] = q.Scales
				}
				// (the quotient form adds epsilon to gamma before rounding,
				// which lifts both off the midpoint)
				if tn.name == "blockpair" && (gs == "tensor" || gs == "row") {
					require.NotEqual(t, scales[SumStrided16][0], scales[SumBlocked16][0], "%s/%s: the orders must differ here", tn.name, gs)
				}
			}
		}
	}
}

func int8Bytes(t []int8) []byte {
	b := make([]byte, len(t))
	for i, v := range t {
		b[i] = byte(v)
	}
	return b
}
