package sign

import (
	"crypto/ed25519"
	"encoding/hex"
	"fmt"
	"math/big"
	"slices"
	"testing"

	"github.com/stretchr/testify/require"
)

// encodePoint is RFC 8032, section 5.1.2: y in 32 little-endian bytes, the
// low bit of x in the top bit of the last byte.
func encodePoint(x, y *big.Int) string {
	b := make([]byte, 32)
	y.FillBytes(b)
	slices.Reverse(b)
	b[31] |= byte(x.Bit(0)) << 7
	return hex.EncodeToString(b)
}

// smallOrderPoints derives the eight points of edwards25519 whose order
// divides 8 by arithmetic on the curve equation of RFC 8032, section 5.1
// (-x² + y² = 1 + d·x²·y² over p = 2^255 - 19): the identity (0, 1); the
// point of order 2, (0, -1); the two of order 4, y = 0 and x² = -1; and
// the four of order 8, whose double has y = 0: doubling gives
// y' = (y² + x²) / (2 - y² + x²), so y² = -x², and then the curve
// equation gives d·x⁴ - 2·x² - 1 = 0, x² = (1 ± √(1 + d)) / d.
func smallOrderPoints(t *testing.T) []string {
	t.Helper()
	p := new(big.Int).Sub(new(big.Int).Lsh(big.NewInt(1), 255), big.NewInt(19))
	mod := func(z *big.Int) *big.Int { return z.Mod(z, p) }
	d := mod(new(big.Int).Mul(big.NewInt(-121665), new(big.Int).ModInverse(big.NewInt(121666), p)))
	neg := func(z *big.Int) *big.Int { return mod(new(big.Int).Neg(z)) }
	one, zero := big.NewInt(1), big.NewInt(0)
	sqrtM1 := new(big.Int).ModSqrt(neg(one), p)
	require.NotNil(t, sqrtM1, "-1 is a square mod p (p ≡ 1 mod 4)")

	points := []string{encodePoint(zero, one), encodePoint(zero, neg(one)),
		encodePoint(sqrtM1, zero), encodePoint(neg(sqrtM1), zero)}
	r := new(big.Int).ModSqrt(mod(new(big.Int).Add(one, d)), p)
	require.NotNil(t, r, "1 + d is a square")
	dInv := new(big.Int).ModInverse(d, p)
	for _, root := range []*big.Int{r, neg(r)} {
		xx := mod(new(big.Int).Mul(mod(new(big.Int).Add(one, root)), dInv))
		x := new(big.Int).ModSqrt(xx, p)
		if x == nil {
			continue // the other root: x² is no square, no point
		}
		y := new(big.Int).ModSqrt(neg(xx), p)
		require.NotNil(t, y)
		// on the curve: -x² + y² = 1 + d·x²·y²
		lhs := mod(new(big.Int).Add(neg(xx), mod(new(big.Int).Mul(y, y))))
		rhs := mod(new(big.Int).Add(one, mod(new(big.Int).Mul(d, mod(new(big.Int).Mul(xx, mod(new(big.Int).Mul(y, y))))))))
		require.Zero(t, lhs.Cmp(rhs))
		for _, px := range []*big.Int{x, neg(x)} {
			for _, py := range []*big.Int{y, neg(y)} {
				points = append(points, encodePoint(px, py))
			}
		}
	}
	require.Len(t, points, 8)
	return points
}

func TestSmallOrderKeysRefused(t *testing.T) {
	points := smallOrderPoints(t)
	// From memory: the encodings of the eight small-order points as the
	// literature on ed25519 malleability and common library blocklists
	// list them (canonical encodings only).
	fromMemory := []string{
		"0100000000000000000000000000000000000000000000000000000000000000", // identity
		"ecffffffffffffffffffffffffffffffffffffffffffffffffffffffffffff7f", // order 2
		"0000000000000000000000000000000000000000000000000000000000000000", // order 4
		"0000000000000000000000000000000000000000000000000000000000000080", // order 4
		"26e8958fc2b227b045c3f489f2ef98f0d5dfac05d3c63339b13802886d53fc05", // order 8
		"26e8958fc2b227b045c3f489f2ef98f0d5dfac05d3c63339b13802886d53fc85", // order 8
		"c7176a703d4dd84fba3c0b760d10670f2a2053fa2c39ccc64ec7fd7792ac037a", // order 8
		"c7176a703d4dd84fba3c0b760d10670f2a2053fa2c39ccc64ec7fd7792ac03fa", // order 8
	}
	require.ElementsMatch(t, fromMemory, points, "derived points against the remembered list")

	identity := "0100000000000000000000000000000000000000000000000000000000000000"
	forged := append(mustHex(t, identity), make([]byte, 32)...) // R = identity, S = 0
	for _, enc := range points {
		key := mustHex(t, enc)
		// Outside check (Go's crypto/ed25519, RFC 8032 verification):
		// with this key, the forged signature verifies for some message,
		// which only a key of small order allows; for the identity, for
		// every message.
		accepted := 0
		for i := range 64 {
			if ed25519.Verify(key, fmt.Appendf(nil, "fernmoss manifest %d", i), forged) {
				accepted++
			}
		}
		require.Positive(t, accepted, "key %s", enc)
		if enc == identity {
			require.Equal(t, 64, accepted)
		}

		err := checkPublicKey(key)
		require.ErrorIs(t, err, ErrWeakKey, enc)
		require.Contains(t, err.Error(), "small order")
		_, err = parsePublicKey("weak.pub", []byte(textPublicKey(key)))
		require.ErrorIs(t, err, ErrWeakKey, enc)
	}
}

// textPublicKey writes a ternkit public key file for any 32 bytes.
func textPublicKey(raw []byte) string {
	k := &PublicKey{key: raw}
	return "ternkit public key 1\nkey-id " + k.ID() + "\ned25519 " + b64.EncodeToString(raw) + "\n"
}

// RFC 8032, section 5.1.3: a y coordinate of p or more fails decoding,
// and x = 0 with the sign bit set is an error; ternkit refuses both, and
// bytes that are no point at all.
func TestNonCanonicalKeysRefused(t *testing.T) {
	le := func(v *big.Int, sign byte) []byte {
		b := make([]byte, 32)
		v.FillBytes(b)
		slices.Reverse(b)
		b[31] |= sign << 7
		return b
	}
	p := new(big.Int).Set(fieldP)
	good := testKey(t, 11).Public().key
	cases := []struct {
		name string
		key  []byte
		want string
	}{
		{"y = p (0 mod p)", le(p, 0), "non-canonical"},
		{"y = p + 1 (the identity's y)", le(new(big.Int).Add(p, big.NewInt(1)), 0), "non-canonical"},
		{"y = 2^255 - 1", le(new(big.Int).Sub(new(big.Int).Lsh(big.NewInt(1), 255), big.NewInt(1)), 1), "non-canonical"},
		{"identity with the sign bit", le(big.NewInt(1), 1), "sign bit"},
		{"order 2 with the sign bit", le(new(big.Int).Sub(p, big.NewInt(1)), 1), "sign bit"},
		{"y = 2: no point", le(big.NewInt(2), 0), "not a point"},
	}
	// a non-canonical encoding of a point of large order: y + p for a
	// small y of the curve, found by trying
	for y := int64(3); y < 19; y++ {
		if _, err := decodePoint(le(big.NewInt(y), 0)); err == nil {
			cases = append(cases, struct {
				name string
				key  []byte
				want string
			}{fmt.Sprintf("y = p + %d", y), le(new(big.Int).Add(p, big.NewInt(y)), 0), "non-canonical"})
			break
		}
	}
	require.Len(t, cases, 7, "some y below 19 is on the curve")
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := checkPublicKey(c.key)
			require.ErrorIs(t, err, ErrWeakKey)
			require.Contains(t, err.Error(), c.want)
		})
	}
	// every real key passes, and the RFC 8032 TEST 1 key
	require.NoError(t, checkPublicKey(good))
	require.NoError(t, checkPublicKey(mustHex(t, "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")))
	for i := range 32 {
		require.NoError(t, checkPublicKey(testKey(t, byte(100+i)).Public().key))
	}
}

// RFC 8032, section 5.1.7: a signature whose S is not below the group
// order L is refused (Go's crypto/ed25519 does; this holds ternkit's
// Verify to it). S + L verifies under a cofactor-free equation check alone.
func TestNonCanonicalSRefused(t *testing.T) {
	k := testKey(t, 12)
	var h [32]byte
	h[0] = 7
	s := k.Sign(h)
	require.NoError(t, k.Public().Verify(s, h))
	// L = 2^252 + 27742317777372353535851937790883648493 (RFC 8032, section 5.1)
	L, ok := new(big.Int).SetString("7237005577332262213973186563042994240857116359379907606001950938285454250989", 10)
	require.True(t, ok)
	require.Zero(t, L.Cmp(new(big.Int).Add(new(big.Int).Lsh(big.NewInt(1), 252), mustBig(t, "27742317777372353535851937790883648493"))))
	// addL replaces S (little-endian, RFC 8032 section 5.1.6) by S + L,
	// which still fits 32 bytes
	addL := func(sig *Signature) {
		sb := slices.Clone(sig.Ed25519[32:])
		slices.Reverse(sb)
		S := new(big.Int).Add(new(big.Int).SetBytes(sb), L)
		out := make([]byte, 32)
		S.FillBytes(out)
		slices.Reverse(out)
		copy(sig.Ed25519[32:], out)
	}
	bad := *s
	addL(&bad)
	require.ErrorIs(t, k.Public().Verify(&bad, h), ErrBadSignature)
	ssh := k.SignSSH(h)
	require.NoError(t, k.Public().Verify(ssh, h))
	addL(ssh)
	require.ErrorIs(t, k.Public().Verify(ssh, h), ErrBadSignature)
}

func mustBig(t *testing.T, s string) *big.Int {
	t.Helper()
	v, ok := new(big.Int).SetString(s, 10)
	require.True(t, ok)
	return v
}
