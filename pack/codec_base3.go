package pack

import (
	"encoding/binary"
	"fmt"
)

// base3Invalid marks a base3Table entry of a byte no encoder writes
// (243 … 255); it sits in byte 7, which a decoded entry never uses.
const base3Invalid = 0x80 << 56

// base3Table[b] holds the 5 trits of payload byte b < 243 as int8 bytes
// in little-endian order (trit 0 in the low byte), bytes 5 … 7 zero;
// entries 243 … 255 are base3Invalid.
var base3Table [256]uint64

var pow3 = [6]int{1, 3, 9, 27, 81, 243}

func init() {
	for b := 0; b < 256; b++ {
		if b >= 243 {
			base3Table[b] = base3Invalid
			continue
		}
		var v uint64
		x := b
		for k := 0; k < 5; k++ {
			v |= uint64(uint8(codeTrit[x%3])) << (8 * k)
			x /= 3
		}
		base3Table[b] = v
	}
}

func encodeBase3(dst []byte, trits []int8) []byte { return encodeDigits(dst, trits, 5, 3) }

// decodeBase3 decodes 8 payload bytes (40 trits) per step: each table
// entry is stored as an 8-byte little-endian word at 5-byte stride, so the
// next store overwrites the 3 spare bytes; invalid bytes are collected in
// one flag word and located after the step. The payload length has been
// checked.
func decodeBase3(dst []int8, payload []byte) error {
	n := len(dst)
	full := n / 5
	out := unsafeInt8Bytes(dst)
	j := 0
	// 8 bytes per step write out[5j : 5j+43]; stop while that fits in dst.
	for ; j+8 <= full && 5*j+43 <= n; j += 8 {
		p := payload[j : j+8]
		o := out[5*j : 5*j+43]
		v0, v1, v2, v3 := base3Table[p[0]], base3Table[p[1]], base3Table[p[2]], base3Table[p[3]]
		v4, v5, v6, v7 := base3Table[p[4]], base3Table[p[5]], base3Table[p[6]], base3Table[p[7]]
		if (v0|v1|v2|v3|v4|v5|v6|v7)&base3Invalid != 0 {
			return base3CodeError(payload, j)
		}
		binary.LittleEndian.PutUint64(o[0:], v0)
		binary.LittleEndian.PutUint64(o[5:], v1)
		binary.LittleEndian.PutUint64(o[10:], v2)
		binary.LittleEndian.PutUint64(o[15:], v3)
		binary.LittleEndian.PutUint64(o[20:], v4)
		binary.LittleEndian.PutUint64(o[25:], v5)
		binary.LittleEndian.PutUint64(o[30:], v6)
		binary.LittleEndian.PutUint64(o[35:], v7)
	}
	for ; j < full; j++ {
		v := base3Table[payload[j]]
		if v&base3Invalid != 0 {
			return base3CodeError(payload, j)
		}
		for k := 0; k < 5; k++ {
			out[5*j+k] = byte(v >> (8 * k))
		}
	}
	if r := n - 5*full; r > 0 {
		b := payload[full]
		if int(b) >= pow3[r] {
			return fmt.Errorf("%w: base3 last byte %d is %d (holds %d trits, must be below %d)", ErrInvalidCode, full, b, r, pow3[r])
		}
		v := base3Table[b]
		for k := 0; k < r; k++ {
			out[5*full+k] = byte(v >> (8 * k))
		}
	}
	return nil
}

// base3CodeError names the first byte at or after from that is above 242.
func base3CodeError(payload []byte, from int) error {
	j := from
	for payload[j] < 243 {
		j++
	}
	return fmt.Errorf("%w: base3 byte %d is %d (values above 242 are invalid)", ErrInvalidCode, j, payload[j])
}
