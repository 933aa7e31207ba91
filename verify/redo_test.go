package verify

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// bf16Fixture writes a BF16 checkpoint with every kind of tensor (trits
// with one scale and with a scales section, int8 codes, kept as is, kept
// converted) at lengths that leave vector tails, packs it with codec, and
// returns both paths and the source tensors' bytes by name.
func bf16Fixture(t *testing.T, dir string, codec pack.Codec) (src, art string, data map[string][]byte) {
	t.Helper()
	rng := rand.New(rand.NewPCG(21, 22))
	shapes := []struct {
		name  string
		shape []int64
	}{
		{"blocks.0.attn.q.weight", []int64{6, 41}},
		{"blocks.0.mlp.up.weight", []int64{9, 37}},
		{"blocks.0.mlp.down.weight", []int64{10, 7}},
		{"blocks.0.norm.weight", []int64{19}},
		{"blocks.0.post_norm.weight", []int64{13}},
	}
	data = map[string][]byte{}
	var tensors []convert.WriteTensor
	for _, s := range shapes {
		n := s.shape[0]
		if len(s.shape) > 1 {
			n *= s.shape[1]
		}
		b := make([]byte, 2*n)
		for i := range n {
			binary.LittleEndian.PutUint16(b[2*i:], convert.Float32ToBF16(float32(rng.NormFloat64()*0.02)))
		}
		data[s.name] = b
		tensors = append(tensors, convert.WriteTensor{Name: s.name, DType: "BF16", Shape: s.shape, Data: b})
	}
	src = filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, tensors, nil))
	p := &convert.Policy{}
	for _, rule := range []string{"*.q.weight=ternary:row", "*.up.weight=ternary", "*.down.weight=int8",
		"*.norm.weight=keep:f16", "*post_norm*=keep"} {
		r, err := convert.ParseRule(rule)
		require.NoError(t, err)
		p.Rules = append(p.Rules, r)
	}
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art = filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: codec, Recipe: convert.DefaultRecipe(), Policy: p})
	require.NoError(t, err)
	return src, art, data
}

// rewriteSection replaces the bytes of one section of tensor name
// (scales when scales is set, else the payload) with edit's result, of the
// same length, and rewrites the manifest's BLAKE3 of that section so that
// every hash holds: only re-quantizing the source can catch the change.
func rewriteSection(t *testing.T, art, out, name string, scales bool, edit func(p []byte)) manifest.Tensor {
	t.Helper()
	a, err := pack.Open(art)
	require.NoError(t, err)
	tensor, err := a.Tensor(name)
	require.NoError(t, err)
	a.Close()
	e := tensor.Entry
	sec, key := e.Section, "section"
	if scales {
		sec, key = *e.Scales, "scales"
	}
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	p := b[sec.Offset : sec.Offset+sec.Length]
	edit(p)
	sum := blake3.Sum256(p)
	mid := filepath.Join(t.TempDir(), "bytes.tkart")
	require.NoError(t, os.WriteFile(mid, b, 0o644))
	rewriteManifest(t, mid, out, func(m map[string]any) {
		for _, x := range tensorsOf(m) {
			if x := x.(map[string]any); x["name"] == name {
				x[key].(map[string]any)["blake3"] = manifest.HexHash(sum)
			}
		}
	})
	return e
}

// requantizeDetail runs verify --against and returns the detail of the
// one failed requantize check, which must name the tensor.
func requantizeDetail(t *testing.T, art, src, tensor string) string {
	t.Helper()
	rep := runAgainst(t, art, src)
	require.False(t, rep.OK())
	c, ok := rep.Find(CheckRequantize, tensor)
	require.True(t, ok, "no requantize check of %s in %+v", tensor, rep.Checks)
	require.False(t, c.OK, "requantize of %s passed: %+v", tensor, rep.Failures())
	return c.Detail
}

// Trits, int8 codes and scales changed with every hash rewritten to match
// are caught by re-quantizing the source, each with the message that names
// the first differing value: through the byte comparison of the
// fixed-length codecs as through decoding.
func TestAgainstCatchesRewrittenSections(t *testing.T) {
	for _, codec := range []pack.Codec{pack.Bits2, pack.Base3} {
		dir := t.TempDir()
		src, art, _ := bf16Fixture(t, dir, codec)
		rep := runAgainst(t, art, src)
		require.True(t, rep.OK(), "%+v", rep.Failures())
		a, err := pack.Open(art)
		require.NoError(t, err)
		trits := map[string][]int8{}
		for _, name := range []string{"blocks.0.attn.q.weight", "blocks.0.mlp.up.weight"} {
			tensor, err := a.Tensor(name)
			require.NoError(t, err)
			trits[name] = make([]int8, tensor.Len())
			require.NoError(t, tensor.DecodeTrits(trits[name]))
		}
		q, err := a.Tensor("blocks.0.attn.q.weight")
		require.NoError(t, err)
		qScales, err := q.Scales()
		require.NoError(t, err)
		a.Close()

		for _, name := range []string{"blocks.0.attn.q.weight", "blocks.0.mlp.up.weight"} {
			for _, at := range []int{0, 5, len(trits[name]) - 1} {
				t.Run(fmt.Sprintf("%s trit %s %d", codec, name, at), func(t *testing.T) {
					changed := append([]int8(nil), trits[name]...)
					changed[at] = (changed[at]+2)%3 - 1 // 0 → 1, 1 → −1, −1 → 0
					out := filepath.Join(t.TempDir(), "t.tkart")
					rewriteSection(t, art, out, name, false, func(p []byte) {
						copy(p, codec.Encode(nil, changed))
					})
					require.Equal(t, fmt.Sprintf("trit %d is %d, re-quantizing the source gives %d", at, changed[at], trits[name][at]),
						requantizeDetail(t, out, src, name))
				})
			}
		}
		t.Run(string(codec)+" invalid trit code", func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "t.tkart")
			e := rewriteSection(t, art, out, "blocks.0.mlp.up.weight", false, func(p []byte) { p[3] = 0xff })
			detail := requantizeDetail(t, out, src, "blocks.0.mlp.up.weight")
			require.True(t, strings.HasPrefix(detail, fmt.Sprintf("section at byte %d: invalid trit payload", e.Section.Offset)), detail)
		})
		t.Run(string(codec)+" row scale", func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "t.tkart")
			rewriteSection(t, art, out, "blocks.0.attn.q.weight", true, func(p []byte) {
				binary.LittleEndian.PutUint32(p[4*2:], math.Float32bits(0.125))
			})
			require.Equal(t, fmt.Sprintf("scale 2 is 0.125, re-quantizing the source gives %v", qScales[2]),
				requantizeDetail(t, out, src, "blocks.0.attn.q.weight"))
		})
		t.Run(string(codec)+" int8 code", func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "t.tkart")
			var was int8
			rewriteSection(t, art, out, "blocks.0.mlp.down.weight", false, func(p []byte) {
				was = int8(p[11])
				p[11] = byte(was/2 + 3)
			})
			require.Equal(t, fmt.Sprintf("int8 code 11 is %d, re-quantizing the source gives %d", was/2+3, was),
				requantizeDetail(t, out, src, "blocks.0.mlp.down.weight"))
		})
	}
}

// A source weight changed after packing, with the recorded source hash
// rewritten to the changed bytes, is caught by re-quantizing: by the scale
// of its row, or, when the weight becomes NaN, by the error quantizing
// reports. The BF16 source takes the vector decode path.
func TestAgainstCatchesChangedSourceWeight(t *testing.T) {
	const name = "blocks.0.attn.q.weight"
	cases := []struct {
		value uint16 // the new BF16 bits of element 45 (row 1 of 41 columns)
		want  string
	}{
		{convert.Float32ToBF16(0.75), "scale 1 is "},
		{0x7fc0, "re-quantize: "}, // NaN
	}
	for _, c := range cases {
		t.Run(fmt.Sprintf("%#04x", c.value), func(t *testing.T) {
			dir := t.TempDir()
			src, art, data := bf16Fixture(t, dir, pack.Bits2)
			b := append([]byte(nil), data[name]...)
			binary.LittleEndian.PutUint16(b[2*45:], c.value)
			raw, err := os.ReadFile(src)
			require.NoError(t, err)
			at := strings.Index(string(raw), string(data[name]))
			require.GreaterOrEqual(t, at, 0)
			copy(raw[at:], b)
			changed := filepath.Join(t.TempDir(), "src.safetensors")
			require.NoError(t, os.WriteFile(changed, raw, 0o644))
			out := filepath.Join(t.TempDir(), "t.tkart")
			rewriteManifest(t, art, out, func(m map[string]any) {
				for _, x := range tensorsOf(m) {
					if x := x.(map[string]any); x["name"] == name {
						x["source_span"] = manifest.HexHash(convert.SpanIdentity(raw, int64(at), int64(at+len(b))))
					}
				}
			})
			rep := runAgainst(t, out, changed)
			h, ok := rep.Find(CheckSourceHash, name)
			require.True(t, ok)
			require.True(t, h.OK, "the rewritten source hash holds")
			detail := requantizeDetail(t, out, changed, name)
			require.True(t, strings.HasPrefix(detail, c.want), detail)
			if c.value == 0x7fc0 {
				require.Contains(t, detail, "NaN")
			}
		})
	}
}

// A source tensor relabelled to another dtype of the same size, its bytes
// unchanged, fails as a source dtype the manifest does not record (and the
// source file's hash differs); the entry's claims are not re-quantized.
func TestAgainstRelabelledSourceDType(t *testing.T) {
	const name = "blocks.0.mlp.up.weight"
	src, art, _ := bf16Fixture(t, t.TempDir(), pack.Base3)
	raw, err := os.ReadFile(src)
	require.NoError(t, err)
	header := 8 + int(binary.LittleEndian.Uint64(raw))
	at := strings.Index(string(raw[:header]), `"`+name+`"`)
	require.GreaterOrEqual(t, at, 0)
	d := strings.Index(string(raw[at:header]), `"BF16"`)
	require.GreaterOrEqual(t, d, 0)
	copy(raw[at+d:], `"F16" `) // same length: JSON allows the space
	relabelled := filepath.Join(t.TempDir(), "src.safetensors")
	require.NoError(t, os.WriteFile(relabelled, raw, 0o644))
	s, err := convert.Open(relabelled)
	require.NoError(t, err)
	defer s.Close()
	for _, st := range s.Tensors {
		if st.Name == name {
			require.Equal(t, "F16", st.DType, "the relabelled tensor")
		}
	}
	rep, err := Run(art, Options{Source: s})
	require.NoError(t, err)
	_, ok := rep.Find(CheckRequantize, name)
	require.False(t, ok, "an entry that differs from the source is not re-quantized")
	c, ok := rep.Find(CheckManifestField, name)
	require.True(t, ok)
	require.False(t, c.OK)
	require.Equal(t, `source_dtype: manifest records "BF16", the source `+relabelled+` has "F16"`, c.Detail)
	var failed []string
	for _, f := range rep.Failures() {
		failed = append(failed, f.Name)
	}
	require.Equal(t, []string{CheckManifestField, CheckSourceFile}, failed)
}

// failingReaderAt fails every read that touches byte bad.
type failingReaderAt struct {
	data []byte
	bad  int64
}

var errDevice = errors.New("device error")

func (f failingReaderAt) ReadAt(p []byte, off int64) (int, error) {
	if off <= f.bad && f.bad < off+int64(len(p)) {
		return 0, errDevice
	}
	return bytes.NewReader(f.data).ReadAt(p, off)
}

// A section that cannot be read while re-quantizing fails that tensor's
// check with an error naming the section and its offset.
func TestAgainstNamesUnreadableSection(t *testing.T) {
	const name = "blocks.0.mlp.up.weight"
	src, art, _ := bf16Fixture(t, t.TempDir(), pack.Bits2)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	tensor, err := a.Tensor(name)
	require.NoError(t, err)
	a.Close()
	sec := tensor.Entry.Section
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	rep, err := RunReaderAt("bad.tkart", failingReaderAt{b, sec.Offset + sec.Length/2}, int64(len(b)), Options{Source: s})
	require.NoError(t, err)
	c, ok := rep.Find(CheckRequantize, name)
	require.True(t, ok)
	require.False(t, c.OK)
	require.Equal(t, fmt.Sprintf("section %q: byte %d: %v", name, sec.Offset, errDevice), c.Detail)
}

// requantize gives Ternarize's trits and result, for float32 and BF16
// weights, and the fixed-length codecs' bytes of those trits.
func TestRequantize(t *testing.T) {
	rng := rand.New(rand.NewPCG(25, 26))
	const rows, cols = 7, 300
	raw := make([]byte, 2*rows*cols)
	w := make([]float32, rows*cols)
	for i := range w {
		b := math.Float32bits(float32(rng.NormFloat64()*0.02)) >> 16
		raw[2*i], raw[2*i+1] = byte(b), byte(b>>8)
		w[i] = math.Float32frombits(b << 16)
	}
	r := convert.DefaultRecipe()
	for _, g := range []convert.Granularity{convert.PerTensor, {Kind: convert.GranRow}} {
		want := make([]int8, len(w))
		q, err := convert.Ternarize(w, cols, g, r, want)
		require.NoError(t, err)
		for _, codec := range pack.Codecs {
			for _, ws := range []convert.Weights{convert.Float32Weights(w), convert.BF16Weights(raw)} {
				var b redoBuffers
				fresh, got, err := b.requantize(ws, cols, g, r, codec)
				require.NoError(t, err)
				require.Equal(t, want, fresh, "%s %v", codec, g)
				require.Equal(t, q, got, "%s %v", codec, g)
				if codec == pack.Entropy {
					require.Nil(t, b.encoded)
				} else {
					require.Equal(t, codec.Encode(nil, want), b.encoded, "%s %v", codec, g)
				}
			}
		}
	}
}

// storedTrits returns the fresh trits themselves when the payload is their
// encoding, and otherwise the payload's own trits, for every codec; a
// payload no encoder writes is an error wrapping pack.ErrInvalidCode.
func TestStoredTrits(t *testing.T) {
	rng := rand.New(rand.NewPCG(23, 24))
	for _, codec := range pack.Codecs {
		for _, n := range []int{0, 1, 4, 5, 7, 64, 1001} {
			fresh := make([]int8, n)
			for i := range fresh {
				fresh[i] = int8(rng.IntN(3) - 1)
			}
			var b redoBuffers
			if codec != pack.Entropy { // as requantize leaves them
				b.encoded = append([]byte{}, codec.Encode(nil, fresh)...)
			}
			got, same, err := b.storedTrits(codec, codec.Encode(nil, fresh), fresh)
			require.NoError(t, err)
			require.Equal(t, codec != pack.Entropy, same, "%s: equal bytes need no decoding", codec)
			require.True(t, slices.Equal(fresh, got), "%s %d: %v, want %v", codec, n, got, fresh)
			if n == 0 {
				continue
			}
			if codec != pack.Entropy {
				require.Same(t, &fresh[0], &got[0], "%s: equal bytes need no decoding", codec)
			}
			other := append([]int8(nil), fresh...)
			other[n/2] = (other[n/2]+2)%3 - 1
			got, same, err = b.storedTrits(codec, codec.Encode(nil, other), fresh)
			require.NoError(t, err)
			require.False(t, same)
			require.Equal(t, other, got, "%s %d", codec, n)
			_, _, err = b.storedTrits(codec, append(codec.Encode(nil, fresh), 0), fresh)
			require.ErrorIs(t, err, pack.ErrInvalidCode, "%s %d: a byte too many", codec, n)
		}
	}
}

// A large source tensor the artifact keeps as it is, taken in pieces and
// hashed as they come, gets the report it gets whole: passing, and with one
// byte changed (the source hash and the file hash fail, naming the same
// bytes).
func TestAgainstKeptTensorInPieces(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(41, 42))
	big := make([]byte, 5<<20+999)
	for i := range big {
		big[i] = byte(rng.Uint32())
	}
	q := make([]byte, 2*8*40)
	for i := range 8 * 40 {
		binary.LittleEndian.PutUint16(q[2*i:], convert.Float32ToBF16(float32(rng.NormFloat64()*0.02)))
	}
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "embed.tokens.weight", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
		{Name: "blocks.0.attn.q.weight", DType: "BF16", Shape: []int64{8, 40}, Data: q},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	art := filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	s.Close()

	raw, err := os.ReadFile(src)
	require.NoError(t, err)
	at := bytes.Index(raw, big[:64])
	require.GreaterOrEqual(t, at, 0)
	raw[at+len(big)-3] ^= 0x10 // in the last piece
	changed := filepath.Join(dir, "changed.safetensors")
	require.NoError(t, os.WriteFile(changed, raw, 0o644))

	defer func(n int64) { keptPieceSize = n }(keptPieceSize)
	for _, source := range []string{src, changed} {
		keptPieceSize = convert.DefaultPieceSize
		whole := runAgainst(t, art, source)
		keptPieceSize = 1<<20 + 3
		pieces := runAgainst(t, art, source)
		require.Equal(t, whole.Checks, pieces.Checks, source)
		require.Equal(t, source == src, pieces.OK(), "%s: %+v", source, pieces.Failures())
		if source == changed {
			c, ok := pieces.Find(CheckSourceHash, "embed.tokens.weight")
			require.True(t, ok)
			require.False(t, c.OK)
		}
	}
}
