package sign

import (
	"crypto/ed25519"
	"fmt"
	"math/big"
)

// The edwards25519 curve of RFC 8032, section 5.1: -x² + y² = 1 + d·x²·y²
// over GF(p), p = 2^255 - 19, d = -121665/121666.
var (
	fieldP = new(big.Int).Sub(new(big.Int).Lsh(big.NewInt(1), 255), big.NewInt(19))
	curveD = func() *big.Int {
		inv := new(big.Int).ModInverse(big.NewInt(121666), fieldP)
		d := new(big.Int).Mul(big.NewInt(-121665), inv)
		return d.Mod(d, fieldP)
	}()
)

// edPoint is an affine point of edwards25519.
type edPoint struct{ x, y *big.Int }

// decodePoint decodes a 32-byte point encoding by RFC 8032, section
// 5.1.3, and refuses the encodings that rule lets through but no encoder
// writes: a y coordinate of p or more, and x = 0 with the sign bit set.
func decodePoint(b []byte) (edPoint, error) {
	if len(b) != 32 {
		return edPoint{}, fmt.Errorf("%d bytes, want 32", len(b))
	}
	le := make([]byte, 32)
	for i := range le {
		le[i] = b[31-i]
	}
	sign := le[0] >> 7
	le[0] &= 0x7f
	y := new(big.Int).SetBytes(le)
	if y.Cmp(fieldP) >= 0 {
		return edPoint{}, fmt.Errorf("y coordinate is not below 2^255-19 (non-canonical encoding)")
	}
	// x² = (y² - 1) / (d·y² + 1)
	yy := new(big.Int).Mul(y, y)
	u := new(big.Int).Sub(yy, big.NewInt(1))
	v := new(big.Int).Mul(curveD, yy)
	v.Add(v, big.NewInt(1))
	v.ModInverse(v.Mod(v, fieldP), fieldP)
	xx := u.Mul(u, v)
	xx.Mod(xx, fieldP)
	x := new(big.Int).ModSqrt(xx, fieldP)
	if x == nil {
		return edPoint{}, fmt.Errorf("not a point of edwards25519")
	}
	if x.Sign() == 0 && sign == 1 {
		return edPoint{}, fmt.Errorf("x is 0 with the sign bit set (non-canonical encoding)")
	}
	if uint8(x.Bit(0)) != sign {
		x.Sub(fieldP, x)
	}
	return edPoint{x, y}, nil
}

// add is the complete twisted Edwards addition law for a = -1 (RFC 8032,
// section 5.1.4, in affine form).
func (p edPoint) add(q edPoint) edPoint {
	mod := func(z *big.Int) *big.Int { return z.Mod(z, fieldP) }
	x1x2 := mod(new(big.Int).Mul(p.x, q.x))
	y1y2 := mod(new(big.Int).Mul(p.y, q.y))
	t := mod(new(big.Int).Mul(curveD, mod(new(big.Int).Mul(x1x2, y1y2))))
	xn := mod(new(big.Int).Add(new(big.Int).Mul(p.x, q.y), new(big.Int).Mul(p.y, q.x)))
	yn := mod(new(big.Int).Add(y1y2, x1x2))
	xd := mod(new(big.Int).Add(big.NewInt(1), t))
	yd := mod(new(big.Int).Sub(big.NewInt(1), t))
	x := mod(xn.Mul(xn, xd.ModInverse(xd, fieldP)))
	y := mod(yn.Mul(yn, yd.ModInverse(yd, fieldP)))
	return edPoint{x, y}
}

// smallOrder reports whether 8·p is the identity (0, 1): p lies in the
// curve's torsion subgroup of order 8.
func (p edPoint) smallOrder() bool {
	q := p
	for range 3 {
		q = q.add(q)
	}
	return q.x.Sign() == 0 && q.y.Cmp(big.NewInt(1)) == 0
}

// checkPublicKey refuses a public key that is not the canonical encoding
// of a point of edwards25519, or a point of small order. Such a key is
// never made from a private key; with it, a forged signature (R of small
// order, S = 0) verifies for many messages, with the identity for all.
func checkPublicKey(raw []byte) error {
	if len(raw) != ed25519.PublicKeySize {
		return fmt.Errorf("%w: ed25519 public key of %d bytes, want %d", ErrWeakKey, len(raw), ed25519.PublicKeySize)
	}
	p, err := decodePoint(raw)
	if err != nil {
		return fmt.Errorf("%w: ed25519 public key %x: %v", ErrWeakKey, raw, err)
	}
	if p.smallOrder() {
		return fmt.Errorf("%w: ed25519 public key %x is a point of small order", ErrWeakKey, raw)
	}
	return nil
}

// newPublicKey wraps raw key bytes after checkPublicKey.
func newPublicKey(raw []byte) (*PublicKey, error) {
	if err := checkPublicKey(raw); err != nil {
		return nil, err
	}
	return &PublicKey{key: ed25519.PublicKey(append([]byte(nil), raw...))}, nil
}
