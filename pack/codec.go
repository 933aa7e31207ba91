package pack

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strings"
	"unsafe"

	"ternkit/convert"
	"ternkit/manifest"
)

// Codec names a trit payload encoding (pack/FORMAT.md, "Codecs"), or Auto,
// a writer's choice among them.
type Codec string

// Trit codecs.
const (
	Bits2   Codec = manifest.CodecBits2   // 4 trits per byte, decoded by table
	Base3   Codec = manifest.CodecBase3   // 5 trits per byte, 1.6 bits per trit
	Entropy Codec = manifest.CodecEntropy // the base3 payload in a zstd frame
	// Auto is a writer option, never stored: per tensor, Entropy when the
	// trit counts leave room for it and its frame is smaller, else Base3
	// (also on a tie, as it decodes faster); see autoEntropy.
	Auto Codec = "auto"
)

// Codecs lists the trit codecs an artifact stores.
var Codecs = []Codec{Bits2, Base3, Entropy}

// WriterCodecs lists the codec choices of a writer: the stored codecs and Auto.
var WriterCodecs = []Codec{Bits2, Base3, Entropy, Auto}

// ErrCodec reports an unknown codec name.
var ErrCodec = errors.New("unknown codec")

// ErrInvalidCode reports a payload that no encoder writes: a reserved trit
// code, a byte out of range, nonzero padding, a wrong length, a frame
// outside the entropy codec's rules, an int8 code of -128, or a scale out
// of its range. Typically this indicates corrupted input.
var ErrInvalidCode = errors.New("invalid trit payload")

// ParseCodec checks a writer's codec choice (one of WriterCodecs).
func ParseCodec(s string) (Codec, error) {
	for _, c := range WriterCodecs {
		if string(c) == s {
			return c, nil
		}
	}
	names := make([]string, len(WriterCodecs))
	for i, c := range WriterCodecs {
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

// encodeDigits appends one byte per group of per trits, holding their
// codes as digits in radix, least significant first; digits past the end
// of trits are 0.
func encodeDigits(dst []byte, trits []int8, per, radix int) []byte {
	start := len(dst)
	dst = append(dst, make([]byte, (len(trits)+per-1)/per)...)
	encodeDigitsTo(dst[start:], trits, per, radix)
	return dst
}

// encodeDigitsTo is encodeDigits writing the ⌈len(trits)/per⌉ bytes to
// out, whatever it held.
func encodeDigitsTo(out []byte, trits []int8, per, radix int) {
	full := len(trits) / per
	in := unsafeInt8Bytes(trits)
	// full groups without branches on the data, a 64-bit word of trits at
	// a time: the code of a trit byte t is (t & 3) ^ ((t >> 1) & 1)
	// (0 → 0, 1 → 1, −1 = 0xff → 2), for all eight bytes at once
	j := 0
	if useAVX2 { // the vector encoders first, the rest below
		j = encodeVector(out, trits, per)
	}
	if per == 4 {
		j /= 2 // the loop counts 8-trit steps of 2 bytes
		// 8 trits → 2 bytes, by the multiplication below with m = 64, 16, 4,
		// 1: byte k of the product sums d_i·m_(k−i), at most 170, so none
		// carries, and bytes 3 and 7 are d0 + 4·d1 + 16·d2 + 64·d3 and the
		// same of d4..d7
		const m = 64 | 16<<8 | 4<<16 | 1<<24
		for ; 8*j+8 <= len(in); j++ {
			c := wordCodes(binary.LittleEndian.Uint64(in[8*j:])) * m
			binary.LittleEndian.PutUint16(out[2*j:], uint16(c>>24&0xff|c>>48&0xff00))
		}
		j *= 2
	} else { // base3: 5 digits d0..d4 in bytes 0..4 of a word
		// one multiplication puts d0 + 3·d1 + 9·d2 + 27·d3 + 81·d4 in byte 4:
		// byte k of the product sums d_i·m_(k−i) with m = 81, 27, 9, 3, 1;
		// bytes 0..3 sum to at most 240 and byte 4 to 242, so none carries
		const m = 81 | 27<<8 | 9<<16 | 3<<24 | 1<<32
		for ; 5*j+8 <= len(in); j++ {
			c := wordCodes(binary.LittleEndian.Uint64(in[5*j:])) & 0xff_ffff_ffff
			out[j] = byte(c * m >> 32)
		}
	}
	for ; j < full; j++ {
		g := trits[per*j : per*j+per]
		if per == 4 {
			out[j] = codeOf(g[0]) | codeOf(g[1])<<2 | codeOf(g[2])<<4 | codeOf(g[3])<<6
		} else {
			out[j] = codeOf(g[0]) + 3*(codeOf(g[1])+3*(codeOf(g[2])+3*(codeOf(g[3])+3*codeOf(g[4]))))
		}
	}
	if rest := trits[full*per:]; len(rest) > 0 {
		b, pow := 0, 1
		for _, t := range rest {
			b += int(codeOf(t)) * pow
			pow *= radix
		}
		out[full] = byte(b)
	}
}

// encodeVector writes as many full bytes of out as the vector encoders
// take at the start of trits (bits2: 32 trits at a time; base3: 20, with
// 6 trits to spare after them) and returns how many it wrote.
func encodeVector(out []byte, trits []int8, per int) int {
	if per == 4 {
		n := len(trits) &^ 31
		if n > 0 {
			encodeBits2AVX2(&out[0], &trits[0], n)
		}
		return n / 4
	}
	n := max(0, len(trits)-6) / 20 * 20
	if n > 0 {
		encodeBase3AVX2(&out[0], &trits[0], n)
	}
	return n / 5
}

// wordCodes is codeOf for each byte of a word of trits.
func wordCodes(u uint64) uint64 {
	return (u & 0x0303030303030303) ^ ((u >> 1) & 0x0101010101010101)
}

// codeOf is code without a branch.
func codeOf(t int8) byte {
	u := uint8(t)
	return (u & 3) ^ ((u >> 1) & 1)
}

// EncodedLen is the payload length of n trits for a fixed-length codec
// (Bits2, Base3), and -1 for the others.
func (c Codec) EncodedLen(n int) int {
	l, ok := manifest.TritPayloadLen(string(c), int64(n))
	if !ok {
		return -1
	}
	return int(l)
}

// Encode appends the payload of trits to dst in a stored codec. Trits must
// be in {-1, 0, 1}. It panics for Auto and unknown codecs: use EncodeTensor.
func (c Codec) Encode(dst []byte, trits []int8) []byte {
	switch c {
	case Bits2:
		return encodeBits2(dst, trits)
	case Base3:
		return encodeBase3(dst, trits)
	case Entropy:
		return encodeEntropy(dst, trits)
	default:
		panic("pack: encode with codec " + string(c))
	}
}

// EncodeTensor appends the payload of trits to dst and returns the codec
// stored: c itself, or for Auto Base3 or Entropy as autoEntropy decides.
func (c Codec) EncodeTensor(dst []byte, trits []int8) ([]byte, Codec) {
	if c != Auto {
		return c.Encode(dst, trits), c
	}
	start := len(dst)
	dst = encodeBase3(dst, trits)
	var counts convert.TritCounts
	counts.Count(trits)
	if frame, ok := autoEntropy(dst[start:], counts); ok {
		return append(dst[:start], frame...), Entropy
	}
	return dst, Base3
}

// autoEntropy is Auto's choice for a tensor whose base3 payload is digits
// and whose trits are counted by counts: the entropy frame when it is
// smaller, tried only when the counts leave room for it, that is when the
// trits' order-0 entropy is at least 2% below base3's 1.6 bits per trit.
// Trits of Gaussian weights (about 31% zeros, 1.583 bits) leave 1% at
// most, which a frame's own bytes take back: their trial compression is
// skipped.
func autoEntropy(digits []byte, counts convert.TritCounts) ([]byte, bool) {
	if countsEntropy(counts) > autoEntropyBelow {
		return nil, false
	}
	frame := appendEntropyFrame(nil, digits)
	return frame, len(frame) < len(digits)
}

// autoEntropyBelow is the order-0 entropy (bits per trit) under which Auto
// tries the entropy codec: 2% below base3's 1.6.
const autoEntropyBelow = 1.6 * 0.98

// countsEntropy is the order-0 entropy of trits with these counts, in bits
// per trit (0 for none).
func countsEntropy(c convert.TritCounts) float64 {
	n := float64(c.Total())
	h := 0.0
	for _, k := range []int64{c.Neg, c.Zero, c.Pos} {
		if k > 0 {
			p := float64(k) / n
			h -= p * math.Log2(p)
		}
	}
	return h
}

// Decode fills dst (len(dst) is the trit count) from payload. It returns an
// error wrapping ErrInvalidCode, naming the byte index, for any payload an
// encoder would not write; it checks the payload's length, or for Entropy
// the frame's declared content size, before it allocates.
func (c Codec) Decode(dst []int8, payload []byte) error {
	n := len(dst)
	if want := c.EncodedLen(n); want >= 0 && len(payload) != want {
		return fmt.Errorf("%w: %s payload of %d bytes for %d trits (want %d)", ErrInvalidCode, c, len(payload), n, want)
	}
	switch c {
	case Bits2:
		return decodeBits2(dst, payload)
	case Base3:
		return decodeBase3(dst, payload)
	case Entropy:
		return decodeEntropy(dst, payload)
	}
	return fmt.Errorf("%w %q", ErrCodec, string(c))
}

// unsafeInt8Bytes views an int8 slice as bytes, for table decoding.
func unsafeInt8Bytes(s []int8) []byte {
	return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}

// unsafeBytesInt8 views a byte slice as int8 codes, for coding in place.
func unsafeBytesInt8(b []byte) []int8 {
	return unsafe.Slice((*int8)(unsafe.Pointer(unsafe.SliceData(b))), len(b))
}
