package pack

import (
	"errors"
	"math/rand/v2"
	"strings"
	"testing"

	"ternkit/convert"
)

// countInPieces writes payload to a TritCounter for n trits in random
// pieces (empty ones included) and closes it.
func countInPieces(t *testing.T, rng *rand.Rand, c Codec, n int64, payload []byte) (convert.TritCounts, error) {
	t.Helper()
	tc, err := NewTritCounter(c, n)
	if err != nil {
		t.Fatal(err)
	}
	for rest := payload; ; {
		k := rng.IntN(len(rest) + 1)
		if _, err := tc.Write(rest[:k]); err != nil {
			if _, again := tc.Close(); again == nil {
				t.Fatalf("Close after failed Write gives no error (Write: %v)", err)
			}
			return convert.TritCounts{}, err
		}
		if rest = rest[k:]; len(rest) == 0 {
			break
		}
	}
	return tc.Close()
}

// decodedCounts is the reference: decode the payload whole, then count.
func decodedCounts(c Codec, n int64, payload []byte) (convert.TritCounts, error) {
	dst := make([]int8, n)
	var got convert.TritCounts
	if err := c.Decode(dst, payload); err != nil {
		return got, err
	}
	got.Count(dst)
	return got, nil
}

// agreeWithDecode requires the counter to accept exactly the payloads the
// decoder accepts, with the decoded trits' counts.
func agreeWithDecode(t *testing.T, rng *rand.Rand, c Codec, n int64, payload []byte) error {
	t.Helper()
	want, wantErr := decodedCounts(c, n, payload)
	got, err := countInPieces(t, rng, c, n, payload)
	if (err == nil) != (wantErr == nil) {
		t.Fatalf("%s, %d trits, payload % x: counter error %v, decode error %v", c, n, payload, err, wantErr)
	}
	if err != nil && !errors.Is(err, ErrInvalidCode) {
		t.Fatalf("%s: error does not wrap ErrInvalidCode: %v", c, err)
	}
	if err == nil && got != want {
		t.Fatalf("%s, %d trits: counts %+v, decoded %+v", c, n, got, want)
	}
	return err
}

// Valid payloads of every length 0..300 bytes, and every trit count that
// gives that length, count as their decode does.
func TestTritCounterMatchesDecode(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	for _, c := range Codecs {
		per := map[Codec]int64{Bits2: 4, Base3: 5, Entropy: 5}[c]
		for length := int64(0); length <= 300; length++ {
			for n := max(0, per*(length-1)+1); n <= per*length; n++ {
				trits := sparseTrits(rng.Uint64(), int(n), rng.Float64())
				if err := agreeWithDecode(t, rng, c, n, c.Encode(nil, trits)); err != nil {
					t.Fatalf("%s: valid payload of %d trits rejected: %v", c, n, err)
				}
			}
		}
	}
}

// An invalid byte at every position of a payload, and a payload one byte
// short or long, is rejected as decode rejects it; a counter names the
// invalid byte.
func TestTritCounterRejectsAsDecode(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	for _, tc := range []struct {
		c       Codec
		per     int64
		invalid []byte // bytes no encoder writes as a full byte
	}{
		{Bits2, 4, []byte{0x03, 0x0c, 0x30, 0xc0, 0xff, 0x7f}},
		{Base3, 5, []byte{243, 250, 255}},
	} {
		for _, n := range []int64{0, 1, tc.per, 7 * tc.per, 7*tc.per + 2, 83*tc.per - 1, 300 * tc.per} {
			payload := tc.c.Encode(nil, sparseTrits(rng.Uint64(), int(n), 0.3))
			for i := range payload {
				for _, b := range tc.invalid {
					bad := append([]byte(nil), payload...)
					bad[i] = b
					err := agreeWithDecode(t, rng, tc.c, n, bad)
					if err == nil {
						t.Fatalf("%s, %d trits: byte %d = 0x%02x accepted", tc.c, n, i, b)
					}
				}
			}
			agreeWithDecode(t, rng, tc.c, n, append(append([]byte(nil), payload...), 0))
			if len(payload) > 0 {
				agreeWithDecode(t, rng, tc.c, n, payload[:len(payload)-1])
			}
		}
	}
	// the error names the first invalid byte of a full-byte run
	c, _ := NewTritCounter(Bits2, 400)
	_, err := c.Write(append(make([]byte, 37), 0x0c, 0x03))
	if err == nil || !errors.Is(err, ErrInvalidCode) {
		t.Fatalf("bits2 code 3 accepted: %v", err)
	}
	if want := "byte 37 of the bits2 payload is 0x0c"; !strings.Contains(err.Error(), want) {
		t.Fatalf("error %q does not name %q", err, want)
	}
	c, _ = NewTritCounter(Base3, 5000)
	_, _ = c.Write(make([]byte, 500))
	_, err = c.Write(append(make([]byte, 400), 250))
	if want := "byte 900 of the base3 payload is 0xfa"; err == nil || !strings.Contains(err.Error(), want) {
		t.Fatalf("error %v does not name %q", err, want)
	}
}

// Random bytes, mostly invalid, are accepted exactly when decode accepts
// them, for every trit count that fits their length.
func TestTritCounterRandomBytes(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for _, c := range []Codec{Bits2, Base3} {
		per := map[Codec]int64{Bits2: 4, Base3: 5}[c]
		for range 2000 {
			payload := make([]byte, rng.IntN(40))
			for i := range payload {
				// bias towards valid bytes so that some payloads pass
				payload[i] = byte(rng.IntN(256)) & byte(rng.IntN(256))
			}
			n := per*int64(len(payload)) - rng.Int64N(per+1)
			agreeWithDecode(t, rng, c, max(0, n), payload)
		}
	}
}

func FuzzTritCounter(f *testing.F) {
	f.Add([]byte{0x49, 0x02}, uint16(5), uint8(0), uint64(1))
	f.Add([]byte{0xff, 0xff}, uint16(8), uint8(0), uint64(2))
	f.Add([]byte{243}, uint16(5), uint8(1), uint64(3))
	f.Add(Bits2.Encode(nil, sparseTrits(1, 300, 0.3)), uint16(300), uint8(0), uint64(4))
	f.Add(Base3.Encode(nil, sparseTrits(1, 301, 0.3)), uint16(301), uint8(1), uint64(5))
	f.Add(Entropy.Encode(nil, sparseTrits(1, 3000, 0.6)), uint16(3000), uint8(2), uint64(6))
	f.Fuzz(func(t *testing.T, payload []byte, n uint16, codec uint8, seed uint64) {
		c := Codecs[int(codec)%len(Codecs)]
		agreeWithDecode(t, rand.New(rand.NewPCG(seed, 0)), c, int64(n), payload)
	})
}
