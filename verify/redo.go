package verify

import (
	"bytes"

	"ternkit/convert"
	"ternkit/manifest"
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
}

// grow returns (*s)[:n], reallocating when the capacity is short.
func grow[T any](s *[]T, n int) []T {
	if cap(*s) < n {
		*s = make([]T, n)
	}
	return (*s)[:n]
}

// decodeSource decodes the source bytes of the tensor entry e into w, as
// recorded (e.SourceDType). A BF16 source of a quantized tensor still in
// that dtype takes the vector decode of Tensor.DecodeWeights; on any error
// there (a NaN or ±Inf weight) it decodes as recorded, so that what is
// reported does not depend on the path: a non-finite weight is left for
// re-quantizing to report. Other dtypes gain nothing from DecodeWeights,
// which decodes as recorded and then scans for non-finite values.
func decodeSource(st *convert.Tensor, e manifest.Tensor, raw []byte, w []float32) error {
	if e.Kind != manifest.KindKept && e.SourceDType == "BF16" && st.DType == "BF16" && st.DecodeWeights(raw, w) == nil {
		return nil
	}
	return convert.DecodeFloat32(e.SourceDType, raw, w)
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
// is one byte string, it encodes the fresh trits and compares bytes: equal
// bytes mean the payload holds exactly fresh. Otherwise, and for the
// entropy codec (whose compressed bytes may differ between library
// versions), it decodes the payload, so that a difference is named trit by
// trit.
func (b *redoBuffers) storedTrits(c pack.Codec, payload []byte, fresh []int8) (trits []int8, same bool, err error) {
	if c == pack.Bits2 || c == pack.Base3 {
		b.encoded = c.Encode(b.encoded[:0], fresh)
		if bytes.Equal(b.encoded, payload) {
			return fresh, true, nil
		}
	}
	stored := grow(&b.stored, len(fresh))
	if err := c.Decode(stored, payload); err != nil {
		return nil, false, err
	}
	return stored, false, nil
}
