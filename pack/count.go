package pack

import (
	"encoding/binary"
	"fmt"
	"math/bits"

	"ternkit/convert"
)

// TritCounter checks and counts a trit payload written to it in pieces of
// any size. For bits2 and base3 it holds only a few bytes, so verification
// streams sections with bounded memory, and it counts without decoding:
// bits2 by population counts of 64-bit words, base3 by a table of per-byte
// counts. An entropy payload is one frame, kept until Close checks it and
// only then decodes it to its base3 content (at most 32768 times the
// frame's length, pack/FORMAT.md "entropy"), counted as base3. Close reports a short payload or bad
// padding.
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
	switch c {
	case Entropy:
		return &TritCounter{codec: c, n: n}, nil
	case Bits2:
		return &TritCounter{codec: c, n: n, perByte: 4}, nil
	case Base3:
		return &TritCounter{codec: c, n: n, perByte: 5}, nil
	}
	return nil, fmt.Errorf("%w %q", ErrCodec, string(c))
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
	full := max(0, tc.n/tc.perByte-tc.seen) // full bytes still expected
	body := p[:min(int64(len(p)), full)]
	var c convert.TritCounts
	bad := -1
	if tc.codec == Bits2 {
		c, bad = countBits2(body)
	} else {
		c, bad = countBase3(body)
	}
	if bad >= 0 {
		tc.err = fmt.Errorf("%w: byte %d of the %s payload is 0x%02x", ErrInvalidCode, tc.seen+int64(bad), tc.codec, body[bad])
		return bad, tc.err
	}
	tc.counts.Neg += c.Neg
	tc.counts.Zero += c.Zero
	tc.counts.Pos += c.Pos
	if len(body) < len(p) {
		if err := tc.tail(p[len(body):]); err != nil {
			tc.err = err
			return len(body), err
		}
	}
	tc.seen += int64(len(p))
	return len(p), nil
}

// bits2Low selects the low bit of every 2-bit code in a word.
const bits2Low = 0x5555555555555555

// countBits2 counts the trits of full bits2 bytes. The low bit of a 2-bit
// code marks +1 (code 1), the high bit −1 (code 2), both (code 3) an
// invalid code. Two 64-bit words at a time, it gathers the low bits of
// both into one word and the high bits into another and counts each with
// one population count: 64 trits' counts in two. Where the CPU counts
// the bits of 512-bit registers, whole blocks of 64 bytes are counted so
// first (count_amd64.s), unless one holds code 3, and the loops below find
// it. It returns the index of the first invalid byte, or -1.
func countBits2(p []byte) (convert.TritCounts, int) {
	var pos, neg int
	j := 0
	if haveWideCount && len(p) >= 64 {
		if ps, ng, ok := countBits2Wide(p[:len(p)&^63]); ok {
			pos, neg, j = int(ps), int(ng), len(p)&^63
		}
	}
	for ; j+16 <= len(p); j += 16 {
		w := p[j : j+16]
		x0, x1 := binary.LittleEndian.Uint64(w), binary.LittleEndian.Uint64(w[8:])
		if (x0&(x0>>1)|x1&(x1>>1))&bits2Low != 0 {
			break // the loop below names the byte
		}
		pos += bits.OnesCount64(x0&bits2Low | (x1<<1)&^bits2Low)
		neg += bits.OnesCount64((x0>>1)&bits2Low | x1&^bits2Low)
	}
	for ; j < len(p); j++ {
		x := uint64(p[j])
		if bits2HasCode3(x) {
			return convert.TritCounts{}, j
		}
		pos += bits.OnesCount64(x & bits2Low)
		neg += bits.OnesCount64((x >> 1) & bits2Low)
	}
	return convert.TritCounts{Neg: int64(neg), Pos: int64(pos), Zero: int64(4*len(p) - pos - neg)}, -1
}

// firstBits2Code3 is the index of the first byte of p holding code 3.
func firstBits2Code3(p []byte) int {
	for i, b := range p {
		if bits2HasCode3(uint64(b)) {
			return i
		}
	}
	return -1
}

// base3Counts[b] holds the counts of the 5 trits of base3 byte b, each in
// its own bit field of base3Lane bits: +1s from bit 0, −1s from bit
// base3Lane, and, from bit 2·base3Lane, 1 for a byte above 242 that no
// encoder writes. Summing entries sums every field at once.
var base3Counts [256]uint64

// base3Lane is the width of a base3Counts field; base3Block bytes of up to
// 5 counts each fit in it.
const (
	base3Lane  = 21
	base3Block = (1<<base3Lane - 1) / 5
	base3Field = 1<<base3Lane - 1
)

func init() {
	for b := 0; b < 256; b++ {
		if b >= 243 {
			base3Counts[b] = 1 << (2 * base3Lane)
			continue
		}
		var pos, neg uint64
		for x, k := b, 0; k < 5; x, k = x/3, k+1 {
			switch codeTrit[x%3] {
			case 1:
				pos++
			case -1:
				neg++
			}
		}
		base3Counts[b] = pos | neg<<base3Lane
	}
}

// countBase3 counts the trits of full base3 bytes by table, in blocks whose
// sums cannot overflow a field. It returns the index of the first invalid
// byte, or -1.
func countBase3(p []byte) (convert.TritCounts, int) {
	var pos, neg int64
	for from := 0; from < len(p); from += base3Block {
		block := p[from:min(len(p), from+base3Block)]
		var sum uint64
		for _, b := range block {
			sum += base3Counts[b]
		}
		if sum>>(2*base3Lane) != 0 {
			for i, b := range block {
				if b >= 243 {
					return convert.TritCounts{}, from + i
				}
			}
		}
		pos += int64(sum & base3Field)
		neg += int64(sum >> base3Lane & base3Field)
	}
	return convert.TritCounts{Neg: neg, Pos: pos, Zero: 5*int64(len(p)) - pos - neg}, -1
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
		content, err := decodeEntropyContent(tc.frame, (tc.n+4)/5)
		if err != nil {
			return tc.counts, err
		}
		// count the base3 content as a base3 payload, without decoding it
		// to trits: memory follows the frame's checked content size
		base, err := NewTritCounter(Base3, tc.n)
		if err != nil {
			return tc.counts, err
		}
		if _, err := base.Write(content); err != nil {
			return tc.counts, fmt.Errorf("entropy frame content: %w", err)
		}
		counts, err := base.Close()
		if err != nil {
			return tc.counts, fmt.Errorf("entropy frame content: %w", err)
		}
		tc.counts = counts
		return tc.counts, nil
	}
	if want := (tc.n + tc.perByte - 1) / tc.perByte; tc.seen != want {
		return tc.counts, fmt.Errorf("%w: %s payload of %d bytes for %d trits (want %d)", ErrInvalidCode, tc.codec, tc.seen, tc.n, want)
	}
	return tc.counts, nil
}
