package pack

import (
	"fmt"

	"ternkit/convert"
)

// TritCounter checks and counts a trit payload written to it in pieces of
// any size. For bits2 and base3 it holds only a few bytes, so verification
// streams sections with bounded memory; an entropy payload is one frame,
// kept until Close decodes it (at most the base3 size of the tensor).
// Close reports a short payload or bad padding.
type TritCounter struct {
	codec    Codec
	frame    []byte // entropy payload, decoded at Close
	n        int64  // trits the payload must hold
	perByte  int64
	seen     int64 // payload bytes consumed
	counts   convert.TritCounts
	err      error
	scratch  [5]int8
	tailDone bool
}

// NewTritCounter counts a payload of n trits in codec c.
func NewTritCounter(c Codec, n int64) (*TritCounter, error) {
	if c == Entropy {
		return &TritCounter{codec: c, n: n}, nil
	}
	per := map[Codec]int64{Bits2: 4, Base3: 5}[c]
	if per == 0 {
		return nil, fmt.Errorf("%w %q", ErrCodec, string(c))
	}
	return &TritCounter{codec: c, n: n, perByte: per}, nil
}

// byteCounts[codec][b] holds the neg, zero, pos counts of a full byte b,
// and a count of 255 in [0] for a byte no encoder writes.
var byteCounts = map[Codec]*[256][3]uint8{Bits2: new([256][3]uint8), Base3: new([256][3]uint8)}

func init() {
	var t [5]int8
	for c, table := range byteCounts {
		per := map[Codec]int{Bits2: 4, Base3: 5}[c]
		for b := 0; b < 256; b++ {
			if c.Decode(t[:per], []byte{byte(b)}) != nil {
				table[b] = [3]uint8{255, 0, 0}
				continue
			}
			for _, v := range t[:per] {
				table[b][v+1]++
			}
		}
	}
}

// Write checks and counts the next bytes of the payload.
func (tc *TritCounter) Write(p []byte) (int, error) {
	if tc.err != nil {
		return 0, tc.err
	}
	if tc.codec == Entropy {
		// the manifest bounds the section's length (TritPayloadRange)
		tc.frame = append(tc.frame, p...)
		return len(p), nil
	}
	full := (tc.n / tc.perByte) - tc.seen // full bytes still expected
	table := byteCounts[tc.codec]
	var neg, zero, pos int64
	for i, b := range p {
		if int64(i) >= full {
			if err := tc.tail(p[i:]); err != nil {
				tc.err = err
				return i, err
			}
			break
		}
		c := table[b]
		if c[0] == 255 {
			tc.err = fmt.Errorf("%w: byte %d of the %s payload is 0x%02x", ErrInvalidCode, tc.seen+int64(i), tc.codec, b)
			return i, tc.err
		}
		neg += int64(c[0])
		zero += int64(c[1])
		pos += int64(c[2])
	}
	tc.counts.Neg += neg
	tc.counts.Zero += zero
	tc.counts.Pos += pos
	tc.seen += int64(len(p))
	return len(p), nil
}

// tail handles the bytes after the last full one: at most one byte with
// the remaining trits, whose padding must be zero.
func (tc *TritCounter) tail(p []byte) error {
	at := tc.n / tc.perByte
	r := int(tc.n - at*tc.perByte)
	if r == 0 || len(p) > 1 || tc.tailDone {
		return fmt.Errorf("%w: %s payload longer than %d bytes for %d trits", ErrInvalidCode, tc.codec, (tc.n+tc.perByte-1)/tc.perByte, tc.n)
	}
	if err := tc.codec.Decode(tc.scratch[:r], p); err != nil {
		return fmt.Errorf("%w: last byte %d of the %s payload is 0x%02x (%d trits, padding must be zero)", ErrInvalidCode, at, tc.codec, p[0], r)
	}
	tc.counts.Count(tc.scratch[:r])
	tc.tailDone = true
	return nil
}

// Close reports an error for a payload shorter than its trit count needs,
// and returns the counts.
func (tc *TritCounter) Close() (convert.TritCounts, error) {
	if tc.err != nil {
		return tc.counts, tc.err
	}
	if tc.codec == Entropy {
		trits := make([]int8, tc.n)
		if err := decodeEntropy(trits, tc.frame); err != nil {
			return tc.counts, err
		}
		tc.counts.Count(trits)
		return tc.counts, nil
	}
	if want := (tc.n + tc.perByte - 1) / tc.perByte; tc.seen != want {
		return tc.counts, fmt.Errorf("%w: %s payload of %d bytes for %d trits (want %d)", ErrInvalidCode, tc.codec, tc.seen, tc.n, want)
	}
	return tc.counts, nil
}
