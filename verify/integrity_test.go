package verify

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/pack"
)

// writeInPieces writes p to w in random pieces, empty ones included.
func writeInPieces(t *testing.T, rng *rand.Rand, w interface{ Write([]byte) (int, error) }, p []byte) {
	for len(p) > 0 {
		k := rng.IntN(min(len(p), 11) + 1)
		n, err := w.Write(p[:k])
		require.NoError(t, err)
		require.Equal(t, k, n)
		p = p[k:]
	}
}

// validScale is the rule on scales in floating point (pack/FORMAT.md):
// finite, and > 0 for ternary tensors, ≥ 0 for int8 ones.
func validScale(v float32, ternary bool) bool {
	f := float64(v)
	return !math.IsNaN(f) && !math.IsInf(f, 0) && v >= 0 && (v > 0 || !ternary)
}

// The scale checker tests bits; its verdict matches the floating-point
// rule on the special values of IEEE 754 binary32 and on random words, and
// names the first bad scale whatever the pieces it is written in.
func TestScaleChecker(t *testing.T) {
	// IEEE 754 binary32 bit patterns (the standard's layout: sign,
	// 8 exponent bits, 23 fraction bits)
	special := []struct {
		bits          uint32
		ternary, int8 bool
	}{
		{0x3f800000, true, true},   // 1.0
		{0x00000001, true, true},   // smallest subnormal
		{0x00800000, true, true},   // smallest normal
		{0x7f7fffff, true, true},   // largest finite
		{0x00000000, false, true},  // +0
		{0x80000000, false, true},  // -0, equal to 0
		{0xbf800000, false, false}, // -1.0
		{0x80000001, false, false}, // negative subnormal
		{0x7f800000, false, false}, // +Inf
		{0xff800000, false, false}, // -Inf
		{0x7fc00000, false, false}, // quiet NaN
		{0x7f800001, false, false}, // signalling NaN
		{0xffc00000, false, false}, // negative NaN
	}
	for _, c := range special {
		for _, ternary := range []bool{true, false} {
			want := c.int8
			if ternary {
				want = c.ternary
			}
			require.Equal(t, want, validScale(math.Float32frombits(c.bits), ternary), "reference on %#08x", c.bits)
			sc := &scaleChecker{ternary: ternary, bad: -1}
			sc.check(c.bits)
			require.Equal(t, want, sc.bad < 0, "%#08x ternary=%v", c.bits, ternary)
		}
	}

	rng := rand.New(rand.NewPCG(3, 4))
	for range 3000 {
		words := make([]uint32, rng.IntN(20))
		for i := range words {
			switch rng.IntN(4) {
			case 0:
				words[i] = special[rng.IntN(len(special))].bits
			default: // mostly valid positive values
				words[i] = rng.Uint32() & 0x7effffff
			}
		}
		p := make([]byte, 4*len(words))
		for i, w := range words {
			binary.LittleEndian.PutUint32(p[4*i:], w)
		}
		for _, ternary := range []bool{true, false} {
			wantBad := -1
			for i, w := range words {
				if !validScale(math.Float32frombits(w), ternary) {
					wantBad = i
					break
				}
			}
			sc := &scaleChecker{ternary: ternary, bad: -1}
			writeInPieces(t, rng, sc, p)
			require.Equal(t, wantBad, sc.bad)
			require.Equal(t, len(words), sc.n)
			if wantBad >= 0 {
				require.Equal(t, words[wantBad], math.Float32bits(sc.badValue))
			}
		}
	}
}

// The int8 checker names the first -128 whatever the pieces.
func TestInt8Checker(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for range 2000 {
		p := make([]byte, rng.IntN(50))
		for i := range p {
			p[i] = byte(rng.IntN(255)) // never 0xff … but 0x80 below
			if rng.IntN(30) == 0 {
				p[i] = 0x80
			}
		}
		c := &int8Checker{bad: -1}
		writeInPieces(t, rng, c, p)
		require.Equal(t, int64(bytes.IndexByte(p, 0x80)), c.bad)
		require.Equal(t, int64(len(p)), c.n)
	}
}

// Sections are checked in jobs (streams and pieces) on workers, from a
// memory map or by reads: the report is the same for any worker count and
// either way, for a good artifact, a bad byte in the first or a later
// piece, and a forged piece hash.
func TestVerifySameReportAnyWay(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	good, err := os.ReadFile(art)
	require.NoError(t, err)
	forged := filepath.Join(dir, "forged.tkart")
	forgePieceHash(t, art, forged, 3)
	cases := map[string]string{"good": art, "forged": forged}
	for _, at := range []int64{sec.Offset, sec.Offset + 1<<22 + 9, sec.Offset + sec.Length - 1} {
		b := append([]byte(nil), good...)
		b[at] ^= 1
		name := filepath.Join(dir, "bad-"+string(rune('a'+len(cases)))+".tkart")
		require.NoError(t, os.WriteFile(name, b, 0o644))
		cases[name] = name
	}
	for what, path := range cases {
		b, err := os.ReadFile(path)
		require.NoError(t, err)
		want, err := RunReaderAt(path, bytes.NewReader(b), int64(len(b)), Options{Workers: 1})
		require.NoError(t, err)
		require.Equal(t, what == "good", want.OK(), "%s: %+v", what, want.Failures())
		for _, workers := range []int{1, 2, 3, 8} {
			got, err := Run(path, Options{Workers: workers})
			require.NoError(t, err)
			require.Equal(t, want, got, "%s, %d workers", what, workers)
		}
	}
}

// An artifact truncated after verify mapped it gives a failed check that
// says so, not a crash.
func TestVerifyTruncatedWhileMapped(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	isMapped := mapped(t, art)
	cut := sec.Offset + 1<<22 + 100 // in the second piece
	rep, err := Run(art, Options{Progress: func(done, _ int64) {
		if done == 0 { // after the map, before any section is read
			require.NoError(t, os.Truncate(art, cut))
		}
	}})
	require.NoError(t, err)
	require.False(t, rep.OK())
	f := rep.Failures()[0]
	require.Equal(t, CheckSection, f.Name)
	t.Log(f.Detail)
	if isMapped {
		require.Contains(t, f.Detail, errArtifactChanged.Error())
	}
}

// mapped reports whether verify maps a file like path here.
func mapped(t *testing.T, path string) bool {
	t.Helper()
	a, err := pack.Open(path)
	require.NoError(t, err)
	defer a.Close()
	m := mapArtifact(a)
	defer unmapArtifact(m)
	return m != nil
}
