package pack

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// Trits written in runs of any lengths give the payload and codec that
// EncodeTensor gives for all of them at once, for every codec and every
// length up to 300 (so every tail and every split of a byte's trits).
func TestTritEncoderMatchesEncodeTensor(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 18))
	for _, c := range WriterCodecs {
		for n := 0; n <= 300; n++ {
			trits := randomTrits(rng, n)
			if n%3 == 0 { // mostly zeros, so that auto picks entropy
				for i := range trits {
					if rng.IntN(10) > 0 {
						trits[i] = 0
					}
				}
			}
			want, wantCodec := c.EncodeTensor(nil, trits)
			e, err := NewTritEncoder(c, n)
			require.NoError(t, err)
			for rest := trits; len(rest) > 0; {
				k := min(len(rest), rng.IntN(13))
				require.NoError(t, e.Write(rest[:k]))
				rest = rest[k:]
			}
			var counts convert.TritCounts
			counts.Count(trits)
			got, gotCodec := e.Finish(counts)
			require.Equal(t, wantCodec, gotCodec, "%s n=%d", c, n)
			require.Equal(t, append([]byte{}, want...), append([]byte{}, got...), "%s n=%d", c, n)
		}
	}
	_, err := NewTritEncoder("base4", 1)
	require.ErrorIs(t, err, ErrCodec)
}

// Any trits, written in runs of any lengths, encode to the bytes of
// EncodeTensor (vector and word-at-a-time code alike) and decode back.
func FuzzTritEncoder(f *testing.F) {
	f.Add([]byte{0, 1, 2, 2, 1, 0, 0, 0, 1}, uint8(3), uint8(0))
	f.Add(make([]byte, 300), uint8(7), uint8(1))
	f.Fuzz(func(t *testing.T, data []byte, step uint8, codec uint8) {
		trits := make([]int8, len(data))
		for i, b := range data {
			trits[i] = int8(b%3) - 1
		}
		c := WriterCodecs[int(codec)%len(WriterCodecs)]
		e, err := NewTritEncoder(c, len(trits))
		require.NoError(t, err)
		for rest := trits; len(rest) > 0; {
			k := min(len(rest), 1+int(step))
			require.NoError(t, e.Write(rest[:k]))
			rest = rest[k:]
		}
		var counts convert.TritCounts
		counts.Count(trits)
		got, gotCodec := e.Finish(counts)
		want, wantCodec := c.EncodeTensor(nil, trits)
		require.Equal(t, wantCodec, gotCodec)
		require.Equal(t, append([]byte{}, want...), append([]byte{}, got...))
		back := make([]int8, len(trits))
		require.NoError(t, gotCodec.Decode(back, got))
		require.Equal(t, trits, back)
	})
}
