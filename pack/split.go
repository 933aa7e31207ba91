package pack

import (
	"fmt"
	"sync"

	"ternkit/convert"
)

// SplitEncoder encodes a tensor's trits that arrive in ranges, each range
// in order and the ranges at the same time (convert.Split's Range), into
// the bytes one TritEncoder writes for all of them. Every codec stores
// base-3 or 2-bit digits of a fixed length, so each range writes the bytes
// it holds whole in place; a byte that two ranges share is put together
// from their trits at Finish. The entropy codec's compression of those
// digits runs at Finish, on one goroutine.
type SplitEncoder struct {
	codec Codec
	per   int // trits per digit byte
	n     int
	// digits are the base-3 or 2-bit bytes of all n trits
	digits []byte
	mu     sync.Mutex
	ranges []*rangeEncoder
}

// NewSplitEncoder starts a payload of n trits in codec c (Auto included).
func NewSplitEncoder(c Codec, n int) (*SplitEncoder, error) {
	if _, err := ParseCodec(string(c)); err != nil {
		return nil, err
	}
	if n < 0 {
		return nil, fmt.Errorf("split encoder: %d trits", n)
	}
	e := &SplitEncoder{codec: c, per: 5, n: n}
	if c == Bits2 {
		e.per = 4
	}
	e.digits = make([]byte, (n+e.per-1)/e.per)
	return e, nil
}

// Range returns the write function for trits [start, end); it may be
// called from any goroutine, and the functions it returns run at the same
// time, each on its own range.
func (e *SplitEncoder) Range(start, end int) func(trits []int8) error {
	r := &rangeEncoder{e: e, pos: start, end: end}
	e.mu.Lock()
	e.ranges = append(e.ranges, r)
	e.mu.Unlock()
	return r.write
}

// Finish puts together the bytes the ranges share and returns the payload
// and the codec stored, as TritEncoder.Finish does. Every range must have
// written all its trits.
func (e *SplitEncoder) Finish(counts convert.TritCounts) ([]byte, Codec) {
	radix := 3
	if e.per == 4 {
		radix = 4
	}
	for _, r := range e.ranges {
		for _, t := range r.edges {
			d := int(codeOf(t.trit))
			for range t.pos % e.per {
				d *= radix
			}
			e.digits[t.pos/e.per] += byte(d)
		}
		r.edges = nil
	}
	e.ranges = nil
	return finishDigits(e.codec, e.digits, counts)
}

// rangeEncoder writes one range's trits: the digit bytes the range holds
// whole into the shared digits, the trits of a byte it shares with a
// neighbour (or the tensor's last, short byte) into edges.
type rangeEncoder struct {
	e        *SplitEncoder
	pos, end int // the next trit's index, and the range's end
	pending  [5]int8
	np       int
	edges    []edgeTrit
}

// edgeTrit is a trit of a byte that is not the range's alone.
type edgeTrit struct {
	pos  int
	trit int8
}

func (r *rangeEncoder) write(t []int8) error {
	per := r.e.per
	if len(t) > r.end-r.pos-r.np {
		return fmt.Errorf("split encoder: %d trits past the range's end %d", len(t)-(r.end-r.pos-r.np), r.end)
	}
	for len(t) > 0 {
		switch {
		case r.np == 0 && (r.pos%per != 0 || r.end-r.pos < per):
			r.edges = append(r.edges, edgeTrit{r.pos, t[0]})
			r.pos++
			t = t[1:]
		case r.np > 0 || len(t) < per:
			k := copy(r.pending[r.np:per], t)
			r.np += k
			t = t[k:]
			if r.np == per {
				r.put(r.pending[:per])
				r.np = 0
			}
		default:
			k := min(len(t), r.end-r.pos) / per * per
			r.put(t[:k])
			t = t[k:]
		}
	}
	return nil
}

// put encodes whole bytes of trits at r.pos, a multiple of per.
func (r *rangeEncoder) put(t []int8) {
	at := r.pos / r.e.per
	if r.e.per == 4 {
		encodeDigitsTo(r.e.digits[at:], t, 4, 4)
	} else {
		encodeDigitsTo(r.e.digits[at:], t, 5, 3)
	}
	r.pos += len(t)
}
