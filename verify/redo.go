package verify

import (
	"bytes"

	"ternkit/convert"
	"ternkit/pack"
)

// redoBuffers are one worker's scratch space for checking source tensors,
// reused from tensor to tensor: nothing a verdict holds points into them.
type redoBuffers struct {
	weights []float32 // the decoded source weights
	fresh   []int8    // codes from quantizing the source again
	stored  []int8    // codes decoded from the artifact
	payload []byte    // the artifact section's bytes
	encoded []byte    // fresh codes or weights, encoded as stored
	// workers may share a large tensor's quantization, each goroutine
	// but the caller's taking a slot of gate (convert.TernarizeSplit)
	workers int
	gate    *convert.Gate
	// when set, requantize hands it the fresh trits as they come, so the
	// bound is checked while the weights are in cache
	bound *convert.BoundTracker
	// when set, requantize does not keep the fresh trits (it returns nil):
	// the encoded bytes and the bound tracker hold what is compared
	dropFresh bool
}

// grow returns (*s)[:n], reallocating when the capacity is short.
func grow[T any](s *[]T, n int) []T {
	if cap(*s) < n {
		*s = make([]T, n)
	}
	return (*s)[:n]
}

// requantize quantizes the source weights again with the recorded recipe,
// as pack does (a large tensor shared by the workers), and returns the
// fresh trits; for the fixed-length codecs it encodes them into b.encoded
// as they come, while they are in cache.
func (b *redoBuffers) requantize(w convert.Weights, cols int, g convert.Granularity, r convert.Recipe, c pack.Codec) ([]int8, convert.Ternary, error) {
	var fresh []int8
	if !b.dropFresh {
		fresh = grow(&b.fresh, w.Len())
	}
	var enc *pack.SplitEncoder
	if c == pack.Bits2 || c == pack.Base3 {
		enc, _ = pack.NewSplitEncoder(c, w.Len()) // a known codec: no error
	}
	q, err := convert.TernarizeSplit(w, cols, g, r, convert.Split{Workers: b.workers, Gate: b.gate,
		Range: func(start, end int) func([]int8) error {
			pos := start
			var write func([]int8) error
			if enc != nil {
				write = enc.Range(start, end)
			}
			var bound func([]int8)
			if b.bound != nil {
				bound = b.bound.Range(start, end)
			}
			return func(t []int8) error {
				if fresh != nil {
					pos += copy(fresh[pos:end], t)
				}
				if bound != nil {
					bound(t)
				}
				if write != nil {
					return write(t)
				}
				return nil
			}
		}})
	b.encoded = nil
	if enc != nil && err == nil {
		b.encoded, _ = enc.Finish(q.Counts) // a fixed-length codec: the counts do not matter
	}
	return fresh, q, err
}

// readPayload reads the tensor's section into the scratch space, without
// checking its hash: what is compared is the bytes as they are.
func (b *redoBuffers) readPayload(a *pack.Artifact, t *pack.Tensor) ([]byte, error) {
	s := t.Entry.Section
	if s.Length < 0 || s.Offset < 0 || s.Length > a.Size()-s.Offset {
		return t.Payload() // its error names the section and offset
	}
	p := grow(&b.payload, int(s.Length))
	if _, err := a.ReaderAt().ReadAt(p, s.Offset); err != nil {
		return t.Payload()
	}
	return p, nil
}

// storedTrits returns the trits the payload holds, and whether they are
// fresh itself. For the fixed-length codecs, whose encoding of given trits
// is one byte string, it compares the payload with the fresh trits' bytes
// (b.encoded, from requantize): equal bytes mean the payload holds exactly
// fresh. Otherwise, and for the
// entropy codec (whose compressed bytes may differ between library
// versions), it decodes the payload, so that a difference is named trit by
// trit.
func (b *redoBuffers) storedTrits(c pack.Codec, payload []byte, fresh []int8) (trits []int8, same bool, err error) {
	if b.sameEncoded(c, payload) {
		return fresh, true, nil
	}
	stored := grow(&b.stored, len(fresh))
	if err := c.Decode(stored, payload); err != nil {
		return nil, false, err
	}
	return stored, false, nil
}

// sameEncoded reports whether the payload holds exactly the fresh trits'
// bytes of a fixed-length codec (b.encoded, from requantize).
func (b *redoBuffers) sameEncoded(c pack.Codec, payload []byte) bool {
	return (c == pack.Bits2 || c == pack.Base3) && b.encoded != nil && bytes.Equal(b.encoded, payload)
}
