package pack

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
	"ternkit/manifest"
)

func TestEntropyRoundTripBlocks(t *testing.T) {
	// 5 × 128 KiB trits fill one block exactly; one more starts a second.
	for _, n := range []int{0, 1, 4, 5, 6, 5 * manifest.EntropyBlockMax, 5*manifest.EntropyBlockMax + 1, 3 << 20} {
		trits := sparseTrits(uint64(n), n, 0.6)
		content := Base3.Encode(nil, trits)
		_, hi, _ := manifest.TritPayloadRange(manifest.CodecEntropy, int64(n))
		for name, p := range map[string][]byte{"encoder": Entropy.Encode(nil, trits), "stored": appendStoredFrame(nil, content)} {
			require.NoError(t, checkEntropyFrame(p, len(content)), "%s n=%d", name, n)
			require.LessOrEqual(t, int64(len(p)), hi, "%s n=%d", name, n)
			got := make([]int8, n)
			require.NoError(t, Entropy.Decode(got, p), "%s n=%d", name, n)
			require.Equal(t, trits, got, "%s n=%d", name, n)
		}
		// The bound is a stored frame with the widest (8-byte) content size.
		require.LessOrEqual(t, hi-int64(len(appendStoredFrame(nil, content))), int64(7), "n=%d", n)
	}
}

// storedFrame7 is the stored frame of the 7 trits 1 −1 0 1 −1 0 0, by the
// layout of RFC 8878: magic FD2FB528 little-endian, descriptor 0x20
// (single segment, 1-byte content size), content size 2, one raw last
// block of 2 bytes (header (2<<3)|1), then base3 bytes 196 and 0.
var storedFrame7 = []byte{0x28, 0xB5, 0x2F, 0xFD, 0x20, 0x02, 0x11, 0x00, 0x00, 196, 0}

func TestEntropyStoredFrameBytes(t *testing.T) {
	trits := []int8{1, -1, 0, 1, -1, 0, 0}
	require.Equal(t, storedFrame7, appendStoredFrame(nil, Base3.Encode(nil, trits)))
	got := make([]int8, 7)
	require.NoError(t, Entropy.Decode(got, storedFrame7))
	require.Equal(t, trits, got)
}

func TestEntropyRejects(t *testing.T) {
	edit := func(f func(p []byte) []byte) []byte { return f(bytes.Clone(storedFrame7)) }
	sparse := Base3.Encode(nil, sparseTrits(9, 10000, 0.6)) // 2000 bytes, Huffman-coded by the encoder
	cases := []struct {
		name    string
		n       int
		payload []byte
		want    string
	}{
		{"empty", 7, nil, "shorter than the smallest frame"},
		{"magic", 7, edit(func(p []byte) []byte { p[0] ^= 1; return p }), "magic"},
		{"not single segment", 7, edit(func(p []byte) []byte { p[4] = 0; return p }), "descriptor 0x00"},
		{"checksum flag", 7, edit(func(p []byte) []byte { p[4] |= 0x04; return p }), "descriptor 0x24"},
		{"dictionary flag", 7, edit(func(p []byte) []byte { p[4] |= 0x01; return p }), "descriptor 0x21"},
		{"reserved bit", 7, edit(func(p []byte) []byte { p[4] |= 0x08; return p }), "descriptor 0x28"},
		{"unused bit", 7, edit(func(p []byte) []byte { p[4] |= 0x10; return p }), "descriptor 0x30"},
		{"content size above the tensor", 7, edit(func(p []byte) []byte { p[5] = 3; return p }), "frame content size 3"},
		{"content size below the tensor", 7, edit(func(p []byte) []byte { p[5] = 1; return p }), "frame content size 1"},
		{"reserved block type", 7, edit(func(p []byte) []byte { p[6] |= 3 << 1; return p }), "reserved block type"},
		{"block over 128 KiB", 7, edit(func(p []byte) []byte {
			h := uint32(manifest.EntropyBlockMax+1)<<3 | 1
			p[6], p[7], p[8] = byte(h), byte(h>>8), byte(h>>16)
			return p
		}), "over the maximum"},
		{"raw blocks over the content size", 7, edit(func(p []byte) []byte { p[6] = 3<<3 | 1; return append(p, 0) }), "more than the frame content size"},
		{"truncated block", 7, storedFrame7[:len(storedFrame7)-1], "truncated"},
		{"no last block", 7, edit(func(p []byte) []byte { p[6] &^= 1; return p }), "truncated"},
		{"byte after the frame", 7, append(bytes.Clone(storedFrame7), 0), "1 bytes after the frame"},
		{"second frame", 7, append(bytes.Clone(storedFrame7), storedFrame7...), "11 bytes after the frame"},
		{"content not base3", 7, edit(func(p []byte) []byte { p[9] = 250; return p }), "base3 byte 0 is 250"},
		{"content padding digit", 7, edit(func(p []byte) []byte { p[10] = 9; return p }), "must be below 9"},
		{"compressed block past the content size", 5000, func() []byte {
			// A 2000-byte frame relabelled as 1000 bytes: its 2-byte
			// content size field holds size − 256 (RFC 8878).
			p := Entropy.Encode(nil, sparseTrits(9, 10000, 0.6))
			require.Equal(t, byte(1<<6|zstdFHDSingle), p[4])
			require.Equal(t, uint16(len(sparse)-256), binary.LittleEndian.Uint16(p[5:]))
			binary.LittleEndian.PutUint16(p[5:], 1000-256)
			return p
		}(), "entropy frame"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := Entropy.Decode(make([]int8, c.n), c.payload)
			require.ErrorIs(t, err, ErrInvalidCode)
			require.Contains(t, err.Error(), c.want)
		})
	}
}

// A frame that claims far more content than the tensor holds is rejected
// before anything of that size is allocated.
func TestEntropyClaimCheckedBeforeAllocating(t *testing.T) {
	p := []byte{0x28, 0xB5, 0x2F, 0xFD, 3<<6 | zstdFHDSingle, 0, 0, 0, 0, 0, 1, 0, 0, 0x01, 0x00, 0x00} // content size 2^40
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	err := Entropy.Decode(make([]int8, 7), p)
	runtime.ReadMemStats(&after)
	require.ErrorIs(t, err, ErrInvalidCode)
	require.Contains(t, err.Error(), "frame content size 1099511627776")
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(1<<20))
}

// Outside check: the zstd CLI (Debian zstd, a reference implementation of
// RFC 8878) decodes our frames to the base3 payload, and our decoder reads
// a frame the CLI wrote.
func TestEntropyZstdCLI(t *testing.T) {
	zstdBin := outsidetool.Require(t, "zstd", "zstd")
	dir := t.TempDir()
	trits := sparseTrits(4, 1<<20, 0.6) // 1.6 blocks of base3 bytes
	content := Base3.Encode(nil, trits)

	frame := filepath.Join(dir, "section.zst")
	require.NoError(t, os.WriteFile(frame, Entropy.Encode(nil, trits), 0o644))
	out, err := exec.Command(zstdBin, "-d", "-q", "-c", frame).Output()
	require.NoError(t, err)
	require.Equal(t, content, out)

	// A section extracted from an artifact decodes to the base3 payload of
	// the tensor's trits.
	art := filepath.Join(dir, "a"+Extension)
	buildArtifact(t, autoSource(t, dir), art, Entropy)
	a, err := Open(art)
	require.NoError(t, err)
	defer a.Close()
	for _, e := range a.Tensors() {
		tn, err := a.Tensor(e.Name)
		require.NoError(t, err)
		sec, err := tn.VerifiedPayload()
		require.NoError(t, err)
		extracted := filepath.Join(dir, "section-"+e.Name)
		require.NoError(t, os.WriteFile(extracted, sec, 0o644))
		out, err := exec.Command(zstdBin, "-d", "-q", "-c", extracted).Output()
		require.NoError(t, err, e.Name)
		tr := make([]int8, tn.Len())
		require.NoError(t, tn.DecodeTrits(tr))
		require.Equal(t, Base3.Encode(nil, tr), out, e.Name)
	}

	raw := filepath.Join(dir, "content.bin")
	require.NoError(t, os.WriteFile(raw, content, 0o644))
	theirs, err := exec.Command(zstdBin, "-q", "-c", "--no-check", "-19", raw).Output()
	require.NoError(t, err)
	got := make([]int8, len(trits))
	require.NoError(t, Entropy.Decode(got, theirs))
	require.Equal(t, trits, got)
}

// Size goals, against facts of the trade: 3^5 = 243 ≤ 256 puts 5 trits in
// a byte (1.6 bits); no code takes fewer bits than the source's entropy
// (Shannon's source coding theorem), log2(3) = 1.585 bits for uniform
// trits; the entropy codec stays within 1% of the empirical entropy plus
// 64 bytes on a tensor with 60% zeros.
func TestCodecSizeGoals(t *testing.T) {
	const n = benchTrits
	require.LessOrEqual(t, 8*float64(Base3.EncodedLen(n))/n, 1.601)

	uniform := randomTrits(rand.New(rand.NewPCG(3, 3)), n)
	h := tritEntropy(uniform)
	require.InDelta(t, math.Log2(3), h, 1e-4)
	for _, c := range Codecs {
		require.GreaterOrEqual(t, 8*float64(len(c.Encode(nil, uniform))), n*h, string(c))
	}

	sparse := sparseTrits(6, n, 0.6)
	h = tritEntropy(sparse)
	require.InDelta(t, 1.371, h, 0.005) // −0.6·log2 0.6 − 2·0.2·log2 0.2
	ent := len(Entropy.Encode(nil, sparse))
	require.LessOrEqual(t, float64(ent), 1.01*n*h/8+64)
	require.GreaterOrEqual(t, 8*float64(ent), n*h)

	p, c := Auto.EncodeTensor(nil, sparse)
	require.Equal(t, Entropy, c)
	require.Len(t, p, ent)
	gauss := gaussianTrits(t, 5, n)
	p, c = Auto.EncodeTensor([]byte("prefix"), gauss)
	require.Equal(t, Base3, c, "Gaussian trits are within 1.1%% of log2(3): no gain over base3")
	require.Equal(t, append([]byte("prefix"), Base3.Encode(nil, gauss)...), p)
}

// Auto tries the entropy codec only when the trit counts leave room for
// it. Order-0 entropy by its definition (Shannon 1948, −Σ p log2 p): three
// equal counts give log2 3 = 1.58496…; counts 1, 2, 1 give 1.5 bits; one
// value alone gives 0.
func TestAutoTriesEntropyByCounts(t *testing.T) {
	require.InDelta(t, math.Log2(3), countsEntropy(convert.TritCounts{Neg: 5, Zero: 5, Pos: 5}), 1e-12)
	require.InDelta(t, 1.5, countsEntropy(convert.TritCounts{Neg: 1, Zero: 2, Pos: 1}), 1e-12)
	require.Equal(t, 0.0, countsEntropy(convert.TritCounts{Zero: 7}))
	require.Equal(t, 0.0, countsEntropy(convert.TritCounts{}))

	rng := rand.New(rand.NewPCG(61, 62))
	for _, c := range []struct {
		zeros float64
		want  Codec
	}{
		{0.31, Base3},   // Gaussian weights: 1.583 bits, no trial
		{0.60, Entropy}, // 1.371 bits: tried, and smaller
		{0.99, Entropy},
	} {
		trits := make([]int8, 20000)
		for i := range trits {
			if rng.Float64() >= c.zeros {
				trits[i] = int8(2*rng.IntN(2) - 1)
			}
		}
		var counts convert.TritCounts
		counts.Count(trits)
		_, tried := autoEntropy(Base3.Encode(nil, trits), counts)
		_, codec := Auto.EncodeTensor(nil, trits)
		require.Equal(t, c.want, codec, "%.0f%% zeros, entropy %.3f", 100*c.zeros, countsEntropy(counts))
		require.Equal(t, c.want == Entropy, tried)
	}
}
