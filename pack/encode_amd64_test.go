package pack

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// The vector encoders write the bytes the word-at-a-time code writes, for
// every length up to 700 (every tail and every overread margin) and both
// fixed-length codecs.
func TestEncodersSameWithoutVector(t *testing.T) {
	if !useAVX2 {
		t.Skip("no vector encoders on this machine")
	}
	rng := rand.New(rand.NewPCG(51, 52))
	for n := 0; n <= 700; n++ {
		trits := randomTrits(rng, n)
		for _, c := range []Codec{Bits2, Base3} {
			vector := c.Encode(nil, trits)
			useAVX2 = false
			words := c.Encode(nil, trits)
			useAVX2 = true
			require.Equal(t, words, vector, "%s n=%d", c, n)
		}
	}
}
