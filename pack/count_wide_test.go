package pack

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// countBits2Naive counts code by code: 1 is +1, 2 is −1, 0 is 0, 3 invalid.
func countBits2Naive(p []byte) (convert.TritCounts, int) {
	var c convert.TritCounts
	for i, b := range p {
		for k := 0; k < 8; k += 2 {
			switch (b >> k) & 3 {
			case 0:
				c.Zero++
			case 1:
				c.Pos++
			case 2:
				c.Neg++
			default:
				return convert.TritCounts{}, i
			}
		}
	}
	return c, -1
}

// The 512-bit count gives the counts, and the first invalid byte, of the
// word-by-word count and of the code-by-code one, at every length around
// its 64-byte blocks and with code 3 anywhere.
func TestCountBits2Wide(t *testing.T) {
	if !haveWideCount {
		t.Skip("this CPU lacks AVX-512 population counts: the kernel under test cannot run here")
	}
	saved := haveWideCount
	defer func() { haveWideCount = saved }()
	rng := rand.New(rand.NewPCG(7, 8))
	lengths := []int{0, 1, 15, 16, 63, 64, 65, 127, 128, 129, 1000, 4096, 65536 + 17}
	for _, n := range lengths {
		for trial := range 8 {
			p := make([]byte, n)
			for i := range p {
				for k := 0; k < 8; k += 2 {
					p[i] |= byte(rng.IntN(3)) << k
				}
			}
			if trial%2 == 1 && n > 0 {
				p[rng.IntN(n)] |= 3 << (2 * rng.IntN(4))
			}
			want, wantBad := countBits2Naive(p)
			for _, wide := range []bool{false, true} {
				haveWideCount = wide
				got, bad := countBits2(p)
				require.Equal(t, wantBad, bad, "length %d trial %d wide %v", n, trial, wide)
				if bad < 0 {
					require.Equal(t, want, got, "length %d trial %d wide %v", n, trial, wide)
				}
			}
		}
	}
}
