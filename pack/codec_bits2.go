package pack

import (
	"encoding/binary"
	"fmt"
)

// bits2Table[b] holds the 4 trits of payload byte b as int8 bytes in
// little-endian order (trit 0 in the low byte), zero where b has code 3.
var bits2Table [256]uint32

func init() {
	for b := 0; b < 256; b++ {
		var v uint32
		for k := 0; k < 4; k++ {
			if c := (b >> (2 * k)) & 3; c != 3 {
				v |= uint32(uint8(codeTrit[c])) << (8 * k)
			}
		}
		bits2Table[b] = v
	}
}

// bits2HasCode3 reports whether any 2-bit pair of x is 3 (both bits set).
func bits2HasCode3(x uint64) bool { return x&(x>>1)&0x5555555555555555 != 0 }

func encodeBits2(dst []byte, trits []int8) []byte { return encodeDigits(dst, trits, 4, 4) }

// decodeBits2 decodes 8 payload bytes (32 trits) per step: one word test
// for code 3, then table lookups stored as little-endian words, which is
// byte order independent. The payload length has been checked.
func decodeBits2(dst []int8, payload []byte) error {
	n := len(dst)
	full := n / 4
	out := unsafeInt8Bytes(dst)
	j := 0
	for ; j+8 <= full; j += 8 {
		x := binary.LittleEndian.Uint64(payload[j:])
		if bits2HasCode3(x) {
			return bits2CodeError(payload, j)
		}
		o := out[4*j : 4*j+32]
		binary.LittleEndian.PutUint64(o[0:], uint64(bits2Table[byte(x)])|uint64(bits2Table[byte(x>>8)])<<32)
		binary.LittleEndian.PutUint64(o[8:], uint64(bits2Table[byte(x>>16)])|uint64(bits2Table[byte(x>>24)])<<32)
		binary.LittleEndian.PutUint64(o[16:], uint64(bits2Table[byte(x>>32)])|uint64(bits2Table[byte(x>>40)])<<32)
		binary.LittleEndian.PutUint64(o[24:], uint64(bits2Table[byte(x>>48)])|uint64(bits2Table[byte(x>>56)])<<32)
	}
	for ; j < full; j++ {
		b := payload[j]
		if bits2HasCode3(uint64(b)) {
			return bits2CodeError(payload, j)
		}
		binary.LittleEndian.PutUint32(out[4*j:], bits2Table[b])
	}
	if r := n - 4*full; r > 0 {
		b := payload[full]
		if bits2HasCode3(uint64(b)) || b>>(2*r) != 0 {
			return fmt.Errorf("%w: bits2 last byte %d is 0x%02x (holds %d trits, padding must be 0)", ErrInvalidCode, full, b, r)
		}
		v := bits2Table[b]
		for k := 0; k < r; k++ {
			out[4*full+k] = byte(v >> (8 * k))
		}
	}
	return nil
}

// bits2CodeError names the first byte at or after from that holds code 3.
func bits2CodeError(payload []byte, from int) error {
	j := from
	for !bits2HasCode3(uint64(payload[j])) {
		j++
	}
	return fmt.Errorf("%w: bits2 byte %d is 0x%02x (code 3 is reserved)", ErrInvalidCode, j, payload[j])
}
