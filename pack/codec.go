package pack

import (
	"encoding/binary"
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

// bits2Table[b] holds the 4 trits of byte b as little-endian int8 bytes,
// and bits2Valid[b] whether b has no reserved code.
var (
	bits2Table [256]uint32
	bits2Valid [256]bool
	base3Table [243][5]int8
	pow3       = [6]int{1, 3, 9, 27, 81, 243}
)

func init() {
	for b := 0; b < 256; b++ {
		valid := true
		var v uint32
		for k := 0; k < 4; k++ {
			c := (b >> (2 * k)) & 3
			if c == 3 {
				valid = false
				continue
			}
			v |= uint32(uint8(codeTrit[c])) << (8 * k)
		}
		bits2Table[b] = v
		bits2Valid[b] = valid
	}
	for b := 0; b < 243; b++ {
		x := b
		for k := 0; k < 5; k++ {
			base3Table[b][k] = codeTrit[x%3]
			x /= 3
		}
	}
}

// EncodedLen is the payload length of n trits.
func (c Codec) EncodedLen(n int) int {
	l, _ := manifest.TritPayloadLen(string(c), int64(n))
	return int(l)
}

// Encode appends the payload of trits to dst. Trits must be in {-1, 0, 1}.
func (c Codec) Encode(dst []byte, trits []int8) []byte {
	switch c {
	case Bits2:
		for i := 0; i < len(trits); i += 4 {
			var b byte
			for k := 0; k < 4 && i+k < len(trits); k++ {
				b |= code(trits[i+k]) << (2 * k)
			}
			dst = append(dst, b)
		}
	case Base3:
		for i := 0; i < len(trits); i += 5 {
			var b int
			for k := 0; k < 5 && i+k < len(trits); k++ {
				b += int(code(trits[i+k])) * pow3[k]
			}
			dst = append(dst, byte(b))
		}
	default:
		panic("pack: encode with unknown codec " + string(c))
	}
	return dst
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

func decodeBits2(dst []int8, payload []byte) error {
	n := len(dst)
	full := n / 4
	for j := 0; j < full; j++ {
		b := payload[j]
		if !bits2Valid[b] {
			return fmt.Errorf("%w: bits2 byte %d is 0x%02x (code 3 is reserved)", ErrInvalidCode, j, b)
		}
		binary.LittleEndian.PutUint32(unsafeInt8Bytes(dst[4*j:4*j+4]), bits2Table[b])
	}
	if r := n - 4*full; r > 0 {
		b := payload[full]
		if !bits2Valid[b] || b>>(2*r) != 0 {
			return fmt.Errorf("%w: bits2 last byte %d is 0x%02x (holds %d trits, padding must be 0)", ErrInvalidCode, full, b, r)
		}
		v := bits2Table[b]
		for k := 0; k < r; k++ {
			dst[4*full+k] = int8(uint8(v >> (8 * k)))
		}
	}
	return nil
}

func decodeBase3(dst []int8, payload []byte) error {
	n := len(dst)
	full := n / 5
	for j := 0; j < full; j++ {
		b := payload[j]
		if b >= 243 {
			return fmt.Errorf("%w: base3 byte %d is %d (values above 242 are invalid)", ErrInvalidCode, j, b)
		}
		copy(dst[5*j:5*j+5], base3Table[b][:])
	}
	if r := n - 5*full; r > 0 {
		b := payload[full]
		if int(b) >= pow3[r] {
			return fmt.Errorf("%w: base3 last byte %d is %d (holds %d trits, must be below %d)", ErrInvalidCode, full, b, r, pow3[r])
		}
		copy(dst[5*full:], base3Table[b][:r])
	}
	return nil
}

// unsafeInt8Bytes views an int8 slice as bytes, for table decoding.
func unsafeInt8Bytes(s []int8) []byte {
	return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}
