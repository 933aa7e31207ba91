package pack

import (
	"math"
	"math/rand/v2"
	"testing"

	"ternkit/convert"
	"ternkit/internal/testweights"
)

// benchTrits is the benchmark tensor size: a 1024 × 1024 weight matrix.
const benchTrits = 1 << 20

// gaussianTrits ternarizes n Gaussian latent weights with the default
// absmean recipe; p(0) ≈ 0.31.
func gaussianTrits(tb testing.TB, seed uint64, n int) []int8 {
	w := testweights.Gaussian(rand.New(rand.NewPCG(seed, 1)), n)
	t := make([]int8, n)
	if _, err := convert.Ternarize(w, n, convert.PerTensor, convert.DefaultRecipe(), t); err != nil {
		tb.Fatal(err)
	}
	return t
}

// sparseTrits draws n independent trits with p(0) = p0 and ±1 equally likely.
func sparseTrits(seed uint64, n int, p0 float64) []int8 {
	rng := rand.New(rand.NewPCG(seed, 2))
	t := make([]int8, n)
	for i := range t {
		if u := rng.Float64(); u >= p0 {
			t[i] = 1
			if u >= p0+(1-p0)/2 {
				t[i] = -1
			}
		}
	}
	return t
}

// tritEntropy is the empirical order-0 entropy of trits, in bits per trit.
func tritEntropy(trits []int8) float64 {
	var counts [3]int
	for _, v := range trits {
		counts[v+1]++
	}
	h := 0.0
	for _, c := range counts {
		if c > 0 {
			p := float64(c) / float64(len(trits))
			h -= p * math.Log2(p)
		}
	}
	return h
}

type benchTensor struct {
	name  string
	trits []int8
}

func benchTensors(tb testing.TB) []benchTensor {
	return []benchTensor{
		{"gaussian", gaussianTrits(tb, 5, benchTrits)},
		{"sparse60", sparseTrits(6, benchTrits, 0.6)},
	}
}

// BenchmarkCodecDecode reports, per codec and tensor, decode throughput
// (trits/s), the payload size (bits/trit) and the tensor's empirical
// entropy (entropy-bits/trit) beside it.
func BenchmarkCodecDecode(b *testing.B) {
	for _, bt := range benchTensors(b) {
		h := tritEntropy(bt.trits)
		for _, c := range Codecs {
			p := c.Encode(nil, bt.trits)
			dst := make([]int8, len(bt.trits))
			b.Run(string(c)+"/"+bt.name, func(b *testing.B) {
				b.SetBytes(int64(len(dst)))
				for b.Loop() {
					if err := c.Decode(dst, p); err != nil {
						b.Fatal(err)
					}
				}
				b.ReportMetric(float64(len(dst))*float64(b.N)/b.Elapsed().Seconds(), "trits/s")
				b.ReportMetric(8*float64(len(p))/float64(len(dst)), "bits/trit")
				b.ReportMetric(h, "entropy-bits/trit")
			})
		}
	}
}

// BenchmarkCopyPeer is the peer the decoders are compared with in the same
// run: copying one byte per trit, as fast as memory allows.
func BenchmarkCopyPeer(b *testing.B) {
	src := gaussianTrits(b, 5, benchTrits)
	dst := make([]int8, len(src))
	b.SetBytes(int64(len(dst)))
	for b.Loop() {
		copy(dst, src)
	}
	b.ReportMetric(float64(len(dst))*float64(b.N)/b.Elapsed().Seconds(), "trits/s")
}

func newTestRand(seed uint64) *rand.Rand { return rand.New(rand.NewPCG(seed, seed)) }

// BenchmarkCodecEncode reports encoding throughput per codec on Gaussian
// latent weights (trits/s, as bytes of one trit each).
func BenchmarkCodecEncode(b *testing.B) {
	trits := gaussianTrits(b, 3, benchTrits)
	for _, c := range []Codec{Bits2, Base3} {
		b.Run(string(c), func(b *testing.B) {
			dst := make([]byte, 0, c.EncodedLen(len(trits)))
			b.SetBytes(int64(len(trits)))
			for b.Loop() {
				dst = c.Encode(dst[:0], trits)
			}
		})
	}
}
