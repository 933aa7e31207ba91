// Package tritmat multiplies packed ternary matrices by 8-bit activations
// with exact integer sums: the arithmetic a runtime uses for a ternary
// layer, and the definition that runtimes in other languages are checked
// against.
//
// Contract. A Matrix holds Rows × Cols trits in C order (trit index
// r·Cols + c) packed as the artifact format defines (pack/FORMAT.md):
// bits2 (4 trits per byte, code 0 → 0, 1 → +1, 2 → −1, least significant
// pair first) or base3 (5 trits per byte, the same codes as base-3 digits,
// least significant first). Rows need not start on a byte boundary. For
// int8 activations x, MulInt8 gives, exactly,
//
//	y[r] = Σ_c t[r,c] · x[c]   (int32)
//
// and with a group size G (G divides Cols) one sum per group of G columns:
// y[r·(Cols/G) + j] = Σ_{c = jG}^{jG+G−1} t[r,c] · x[c]. Every product is
// at most 128 in magnitude and Cols is below 2^24, so no sum overflows.
package tritmat

import (
	"errors"
	"fmt"
)

// MaxCols is the largest row length: 128 × (2^24 − 1) fits an int32.
const MaxCols = 1<<24 - 1

// Codec names, as in the artifact format.
const (
	Bits2 = "bits2"
	Base3 = "base3"
)

// ErrInvalid reports a matrix whose description or payload breaks the
// contract: an unknown codec, a wrong length, a code no encoder writes.
var ErrInvalid = errors.New("invalid packed trit matrix")

// Matrix is a packed ternary matrix.
type Matrix struct {
	Codec string // Bits2 or Base3
	Data  []byte // the payload: ⌈Rows·Cols/4⌉ bytes (bits2), ⌈Rows·Cols/5⌉ (base3)
	Rows  int
	Cols  int
}

// Check reports whether the description is consistent (codec, sizes,
// payload length); codes are checked as they are decoded.
func (m Matrix) Check() error {
	if m.Rows < 0 || m.Cols < 0 || m.Cols > MaxCols {
		return fmt.Errorf("%w: %d × %d (columns are 0..%d)", ErrInvalid, m.Rows, m.Cols, MaxCols)
	}
	if m.Cols > 0 && m.Rows > (1<<62)/m.Cols {
		return fmt.Errorf("%w: %d × %d trits overflow", ErrInvalid, m.Rows, m.Cols)
	}
	n := m.Rows * m.Cols
	var want int
	switch m.Codec {
	case Bits2:
		want = (n + 3) / 4
	case Base3:
		want = (n + 4) / 5
	default:
		return fmt.Errorf("%w: codec %q (valid: bits2, base3)", ErrInvalid, m.Codec)
	}
	if len(m.Data) != want {
		return fmt.Errorf("%w: %s payload of %d bytes for %d × %d trits, want %d", ErrInvalid, m.Codec, len(m.Data), m.Rows, m.Cols, want)
	}
	return nil
}

var (
	bits2Trits [256][4]int8
	bits2Bad   [256]bool
	base3Trits [256][5]int8
)

func init() {
	codeTrit := [4]int8{0, 1, -1, 0}
	for b := range 256 {
		for k := range 4 {
			c := b >> (2 * k) & 3
			bits2Trits[b][k] = codeTrit[c]
			if c == 3 {
				bits2Bad[b] = true
			}
		}
		v := b
		for k := range 5 {
			base3Trits[b][k] = codeTrit[v%3]
			v /= 3
		}
	}
}

// Decode writes trits i0 … i0+len(dst)−1 (C order) of m into dst as
// −1, 0, +1. It does not check m (see Check); a code no encoder writes in
// the bytes it reads gives ErrInvalid with the byte's index.
func Decode(dst []int8, m Matrix, i0 int) error {
	switch m.Codec {
	case Bits2:
		return decodeDigits(dst, m.Data, i0, 4)
	case Base3:
		return decodeDigits(dst, m.Data, i0, 5)
	}
	return fmt.Errorf("%w: codec %q", ErrInvalid, m.Codec)
}

func decodeDigits(dst []int8, data []byte, i0, per int) error {
	i, n := i0, i0+len(dst)
	out := dst
	if n > len(data)*per || i0 < 0 {
		return fmt.Errorf("%w: trits %d..%d past the payload's %d", ErrInvalid, i0, n, len(data)*per)
	}
	bad := func(j int) error {
		return fmt.Errorf("%w: byte %d (%d) is not a %s code", ErrInvalid, j, data[j], map[int]string{4: Bits2, 5: Base3}[per])
	}
	// the head, up to a byte boundary
	for i < n && i%per != 0 {
		b := data[i/per]
		if (per == 4 && bits2Bad[b]) || (per == 5 && b > 242) {
			return bad(i / per)
		}
		if per == 4 {
			out[0] = bits2Trits[b][i%4]
		} else {
			out[0] = base3Trits[b][i%5]
		}
		out = out[1:]
		i++
	}
	// whole bytes
	j := i / per
	if per == 4 {
		for ; len(out) >= 4; j++ {
			b := data[j]
			if bits2Bad[b] {
				return bad(j)
			}
			t := &bits2Trits[b]
			out[0], out[1], out[2], out[3] = t[0], t[1], t[2], t[3]
			out = out[4:]
		}
	} else {
		for ; len(out) >= 5; j++ {
			b := data[j]
			if b > 242 {
				return bad(j)
			}
			t := &base3Trits[b]
			out[0], out[1], out[2], out[3], out[4] = t[0], t[1], t[2], t[3], t[4]
			out = out[5:]
		}
	}
	// the tail
	for k := range out {
		b := data[j]
		if (per == 4 && bits2Bad[b]) || (per == 5 && b > 242) {
			return bad(j)
		}
		if per == 4 {
			out[k] = bits2Trits[b][k]
		} else {
			out[k] = base3Trits[b][k]
		}
	}
	return nil
}

// blockTrits is how many trits MulInt8 decodes at a time (at least one
// row): the decoded block stays in the core's cache beside the activations.
const blockTrits = 1 << 16

// MulInt8 multiplies m by ntok activation vectors at once: x holds ntok
// rows of m.Cols int8 values, and dst receives, per token t, Rows·(Cols/G)
// sums at dst[t·Rows·(Cols/G):], as the package comment defines. group is
// G (0 means Cols: one sum per row). The trits are decoded in blocks of
// rows, each block used for every token, so memory follows the block.
func MulInt8(dst []int32, m Matrix, group int, x []int8, ntok int) error {
	if err := m.Check(); err != nil {
		return err
	}
	if group == 0 {
		group = m.Cols
	}
	if m.Cols > 0 && (group <= 0 || m.Cols%group != 0) {
		return fmt.Errorf("%w: group size %d does not divide %d columns", ErrInvalid, group, m.Cols)
	}
	if ntok < 0 || len(x) != ntok*m.Cols {
		return fmt.Errorf("%w: %d activations for %d tokens of %d columns", ErrInvalid, len(x), ntok, m.Cols)
	}
	groups := 0
	if m.Cols > 0 {
		groups = m.Cols / group
	}
	if len(dst) != ntok*m.Rows*groups {
		return fmt.Errorf("%w: %d outputs for %d tokens × %d sums", ErrInvalid, len(dst), ntok, m.Rows*groups)
	}
	return mulRows(dst, m, group, x, ntok, 0, m.Rows)
}

// MulInt8Rows is MulInt8 for rows r0 … r1−1 only: dst receives, per token
// t, (r1−r0)·(Cols/G) sums at dst[t·(r1−r0)·(Cols/G):]. Callers split a
// matrix's rows among cores with it.
func MulInt8Rows(dst []int32, m Matrix, group int, x []int8, ntok, r0, r1 int) error {
	if err := m.Check(); err != nil {
		return err
	}
	if group == 0 {
		group = m.Cols
	}
	if m.Cols > 0 && (group <= 0 || m.Cols%group != 0) {
		return fmt.Errorf("%w: group size %d does not divide %d columns", ErrInvalid, group, m.Cols)
	}
	if r0 < 0 || r1 < r0 || r1 > m.Rows {
		return fmt.Errorf("%w: rows %d..%d of %d", ErrInvalid, r0, r1, m.Rows)
	}
	if ntok < 0 || len(x) != ntok*m.Cols {
		return fmt.Errorf("%w: %d activations for %d tokens of %d columns", ErrInvalid, len(x), ntok, m.Cols)
	}
	groups := 0
	if m.Cols > 0 {
		groups = m.Cols / group
	}
	if len(dst) != ntok*(r1-r0)*groups {
		return fmt.Errorf("%w: %d outputs for %d tokens × %d sums", ErrInvalid, len(dst), ntok, (r1-r0)*groups)
	}
	return mulRows(dst, m, group, x, ntok, r0, r1)
}

func mulRows(dst []int32, m Matrix, group int, x []int8, ntok, first, last int) error {
	if m.Cols == 0 || last == first {
		return nil
	}
	groups := m.Cols / group
	per := (last - first) * groups
	rowsPer := max(1, blockTrits/m.Cols)
	buf := make([]int8, min(rowsPer, last-first)*m.Cols)
	for r0 := first; r0 < last; r0 += rowsPer {
		r1 := min(last, r0+rowsPer)
		block := buf[:(r1-r0)*m.Cols]
		if err := Decode(block, m, r0*m.Cols); err != nil {
			return err
		}
		for t := range ntok {
			xt := x[t*m.Cols : (t+1)*m.Cols]
			out := dst[t*per+(r0-first)*groups : t*per+(r1-first)*groups]
			k := 0
			for r := range r1 - r0 {
				row := block[r*m.Cols : (r+1)*m.Cols]
				for c := 0; c < m.Cols; c += group {
					out[k] = Dot(row[c:c+group], xt[c:c+group])
					k++
				}
			}
		}
	}
	return nil
}

// Dot returns Σ a[i]·b[i] over min(len(a), len(b)) elements, exactly
// (each product fits 16 bits; the sum is exact while the length is at most
// MaxCols). It uses the vector unit where the CPU has one; DotPortable
// defines the result.
func Dot(a, b []int8) int32 {
	n := min(len(a), len(b))
	return dot(a[:n], b[:n])
}

// DotPortable is Dot in plain Go: the definition the vector version is
// held to.
func DotPortable(a, b []int8) int32 {
	n := min(len(a), len(b))
	a, b = a[:n], b[:n]
	var s0, s1, s2, s3 int32
	i := 0
	for ; i+4 <= n; i += 4 {
		s0 += int32(a[i]) * int32(b[i])
		s1 += int32(a[i+1]) * int32(b[i+1])
		s2 += int32(a[i+2]) * int32(b[i+2])
		s3 += int32(a[i+3]) * int32(b[i+3])
	}
	for ; i < n; i++ {
		s0 += int32(a[i]) * int32(b[i])
	}
	return s0 + s1 + s2 + s3
}
