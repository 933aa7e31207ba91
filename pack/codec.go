package pack

import (
	"errors"
	"fmt"
	"strings"
	"unsafe"

	"ternkit/manifest"
)

// Codec names a trit payload encoding (pack/FORMAT.md, "Codecs").
type Codec string

// Trit codecs.
const (
	Bits2 Codec = manifest.CodecBits2 // 4 trits per byte, decoded by table
	Base3 Codec = manifest.CodecBase3 // 5 trits per byte, 1.6 bits per trit
)

// Codecs lists the trit codecs a writer can choose.
var Codecs = []Codec{Bits2, Base3}

// ErrCodec reports an unknown codec name.
var ErrCodec = errors.New("unknown codec")

// ErrInvalidCode reports a trit payload that no encoder writes: a reserved
// code, a byte out of range, nonzero padding or a wrong length. Typically
// this indicates corrupted input.
var ErrInvalidCode = errors.New("invalid trit payload")

// ParseCodec checks a codec name.
func ParseCodec(s string) (Codec, error) {
	for _, c := range Codecs {
		if string(c) == s {
			return c, nil
		}
	}
	names := make([]string, len(Codecs))
	for i, c := range Codecs {
		names[i] = string(c)
	}
	return "", fmt.Errorf("%w %q (valid: %s)", ErrCodec, s, strings.Join(names, ", "))
}

// code maps a trit to its 2-bit or base-3 digit: 0 → 0, +1 → 1, −1 → 2.
func code(t int8) byte {
	switch t {
	case 1:
		return 1
	case -1:
		return 2
	}
	return 0
}

var codeTrit = [3]int8{0, 1, -1}

// EncodedLen is the payload length of n trits.
func (c Codec) EncodedLen(n int) int {
	l, _ := manifest.TritPayloadLen(string(c), int64(n))
	return int(l)
}

// Encode appends the payload of trits to dst. Trits must be in {-1, 0, 1}.
func (c Codec) Encode(dst []byte, trits []int8) []byte {
	switch c {
	case Bits2:
		return encodeBits2(dst, trits)
	case Base3:
		return encodeBase3(dst, trits)
	default:
		panic("pack: encode with unknown codec " + string(c))
	}
}

// Decode fills dst (len(dst) is the trit count) from payload. It returns an
// error wrapping ErrInvalidCode, naming the byte index, for any payload an
// encoder would not write.
func (c Codec) Decode(dst []int8, payload []byte) error {
	n := len(dst)
	if want := c.EncodedLen(n); len(payload) != want {
		return fmt.Errorf("%w: %s payload of %d bytes for %d trits (want %d)", ErrInvalidCode, c, len(payload), n, want)
	}
	switch c {
	case Bits2:
		return decodeBits2(dst, payload)
	case Base3:
		return decodeBase3(dst, payload)
	}
	return fmt.Errorf("%w %q", ErrCodec, string(c))
}

// unsafeInt8Bytes views an int8 slice as bytes, for table decoding.
func unsafeInt8Bytes(s []int8) []byte {
	return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}
