package pack

import "ternkit/convert"

// TritEncoder encodes trits that arrive in runs of any length, in order,
// into one payload: the bytes EncodeTensor gives for all of them at once.
// It lets a quantizer hand over trits while they are in cache instead of
// storing the whole tensor's trits first.
type TritEncoder struct {
	codec   Codec
	per     int // trits per byte of the digits written as they come
	digits  []byte
	pending [5]int8
	np      int
}

// NewTritEncoder starts a payload of about n trits in codec c (Auto
// included).
func NewTritEncoder(c Codec, n int) (*TritEncoder, error) {
	if _, err := ParseCodec(string(c)); err != nil {
		return nil, err
	}
	e := &TritEncoder{codec: c, per: 5}
	if c == Bits2 {
		e.per = 4
	}
	e.digits = make([]byte, 0, (max(n, 0)+e.per-1)/e.per)
	return e, nil
}

// Write encodes the trits t, which must be in {-1, 0, 1}; it never fails.
func (e *TritEncoder) Write(t []int8) error {
	if e.np > 0 { // complete the pending byte first
		k := copy(e.pending[e.np:e.per], t)
		e.np += k
		t = t[k:]
		if e.np < e.per {
			return nil
		}
		e.digits = e.encode(e.digits, e.pending[:e.per])
		e.np = 0
	}
	full := len(t) / e.per * e.per
	e.digits = e.encode(e.digits, t[:full])
	e.np = copy(e.pending[:], t[full:])
	return nil
}

func (e *TritEncoder) encode(dst []byte, t []int8) []byte {
	if e.per == 4 {
		return encodeBits2(dst, t)
	}
	return encodeBase3(dst, t)
}

// Finish returns the payload and the codec stored; for Auto, counts (the
// written trits' counts, which a quantizer knows) decide as EncodeTensor
// does whether the entropy codec is worth trying.
func (e *TritEncoder) Finish(counts convert.TritCounts) ([]byte, Codec) {
	if e.np > 0 {
		e.digits = e.encode(e.digits, e.pending[:e.np])
		e.np = 0
	}
	return finishDigits(e.codec, e.digits, counts)
}

// finishDigits is the payload of a tensor whose trits are encoded as
// digits (bits2 bytes, or base3 digits for entropy and auto) and the codec
// stored: for Auto, counts decide as EncodeTensor does whether the entropy
// codec is worth trying.
func finishDigits(codec Codec, digits []byte, counts convert.TritCounts) ([]byte, Codec) {
	switch codec {
	case Entropy:
		return appendEntropyFrame(nil, digits), Entropy
	case Auto:
		if frame, ok := autoEntropy(digits, counts); ok {
			return frame, Entropy
		}
		return digits, Base3
	}
	return digits, codec
}
