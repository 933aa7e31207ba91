package verify

import (
	"bytes"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
	"ternkit/manifest"
	"ternkit/pack"
)

// rewriteManifest edits an artifact's manifest as plain JSON and writes a
// new artifact whose trailer is consistent again (offset, length, BLAKE3),
// working from pack/FORMAT.md alone: only a check deeper than the trailer
// hash can catch the edit.
func rewriteManifest(t *testing.T, in, out string, edit func(m map[string]any)) {
	t.Helper()
	b, err := os.ReadFile(in)
	require.NoError(t, err)
	tr := b[len(b)-64:]
	off := binary.LittleEndian.Uint64(tr[0:])
	n := binary.LittleEndian.Uint64(tr[8:])
	dec := json.NewDecoder(bytes.NewReader(b[off : off+n]))
	dec.UseNumber()
	var m map[string]any
	require.NoError(t, dec.Decode(&m))
	edit(m)
	body, err := json.Marshal(m)
	require.NoError(t, err)
	newTrailer := make([]byte, 64)
	binary.LittleEndian.PutUint64(newTrailer[0:], off)
	binary.LittleEndian.PutUint64(newTrailer[8:], uint64(len(body)))
	sum := blake3.Sum256(body)
	copy(newTrailer[16:], sum[:])
	copy(newTrailer[56:], tr[56:])
	var w bytes.Buffer
	w.Write(b[:off])
	w.Write(body)
	w.Write(newTrailer)
	require.NoError(t, os.WriteFile(out, w.Bytes(), 0o644))
}

func tensorsOf(m map[string]any) []any { return m["tensors"].([]any) }

func entry(m map[string]any, i int) map[string]any { return tensorsOf(m)[i].(map[string]any) }

// Tampering that keeps every hash consistent is still caught: by the
// layout rules, the manifest rules, or, for a scale, by the source.
func TestVerifyCatchesTampering(t *testing.T) {
	dir := t.TempDir()
	_, art := fixtureWith(t, dir, pack.Base3, mixedPolicy(t), nil)
	plainDir := t.TempDir()
	src, plain := fixture(t, plainDir, pack.Base3, nil) // tensor granularity: scales in the manifest
	good, err := os.ReadFile(art)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	m := a.Manifest()
	q, down := m.Tensors[0], m.Tensors[2]
	a.Close()

	cases := []struct {
		name    string
		make    func(out string)
		against bool
		check   string
		want    string
	}{
		{"swap two sections' bytes", func(out string) {
			b := append([]byte(nil), good...)
			x, y := q.Section, down.Section
			n := min(x.Length, y.Length)
			tmp := append([]byte(nil), b[x.Offset:x.Offset+n]...)
			copy(b[x.Offset:], b[y.Offset:y.Offset+n])
			copy(b[y.Offset:], tmp)
			require.NoError(t, os.WriteFile(out, b, 0o644))
		}, false, CheckSection, "BLAKE3"},
		{"duplicate a tensor name", func(out string) {
			rewriteManifest(t, art, out, func(m map[string]any) { entry(m, 1)["name"] = q.Name })
		}, false, CheckStructure, "duplicate tensor name"},
		{"reorder manifest entries", func(out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				ts := tensorsOf(m)
				ts[0], ts[1] = ts[1], ts[0]
			})
		}, false, CheckStructure, "layout puts it at"},
		{"edit a scale", func(out string) {
			rewriteManifest(t, plain, out, func(m map[string]any) {
				require.Equal(t, "blocks.0.attn.q.weight", entry(m, 0)["name"])
				entry(m, 0)["scale"] = json.Number("0.123")
			})
		}, true, CheckRequantize, "scale 0 is 0.123"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "tampered.tkart")
			c.make(out)
			opts := Options{}
			if c.against {
				s, err := convert.Open(src)
				require.NoError(t, err)
				defer s.Close()
				opts.Source = s
			}
			rep, err := Run(out, opts)
			require.NoError(t, err)
			require.False(t, rep.OK())
			var details []string
			for _, f := range rep.Failures() {
				if f.Name == c.check {
					details = append(details, f.Detail)
				}
			}
			require.NotEmpty(t, details, "no %s failure in %+v", c.check, rep.Failures())
			require.Contains(t, strings.Join(details, "\n"), c.want)
		})
	}
}

// A section longer than manifest.ChunkSize records its pieces' chaining
// values (format 1.4): verify names the first bad piece and its bytes.
func TestVerifyNamesBadChunk(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	at := sec.Offset + 2*(1<<22) + 5 // in the third piece
	b[at] ^= 0x10
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	rep, err := Run(bad, Options{})
	require.NoError(t, err)
	require.False(t, rep.OK())
	f := rep.Failures()[0]
	require.Equal(t, CheckSection, f.Name)
	require.Contains(t, f.Detail, fmt.Sprintf("piece 2 (its bytes %d..%d, file bytes %d..%d) does not match", 2<<22, 3<<22, sec.Offset+2<<22, sec.Offset+3<<22))

	// a manifest whose piece hash is wrong, though the section hash is
	// right, is caught as well (pack/FORMAT.md: a reader checks both)
	forged := filepath.Join(dir, "forged.tkart")
	forgePieceHash(t, art, forged, 1)
	rep, err = Run(forged, Options{})
	require.NoError(t, err)
	require.False(t, rep.OK())
	f = rep.Failures()[0]
	require.Equal(t, CheckSection, f.Name)
	require.Contains(t, f.Detail, fmt.Sprintf("piece 1 (its bytes %d..%d, file bytes %d..%d) does not match", 1<<22, 2<<22, sec.Offset+1<<22, sec.Offset+2<<22))
}

// forgePieceHash writes a copy of art whose first tensor records a wrong
// hash for piece k.
func forgePieceHash(t *testing.T, art, out string, k int) {
	rewriteManifest(t, art, out, func(m map[string]any) {
		cvs := entry(m, 0)["section"].(map[string]any)["piece_cvs"].([]any)
		cvs[k] = strings.Repeat("0", 64)
	})
}

// bigArtifact packs one kept tensor whose section spans four pieces
// (manifest.ChunkSize), the last one short, and returns the artifact and
// the section.
func bigArtifact(t *testing.T, dir string) (string, manifest.Section) {
	n := 3*(1<<22)/4 + 1000 // I32 elements: three full pieces and a short one
	big := make([]byte, 4*n)
	for i := range big {
		big[i] = byte(i * 7)
	}
	src := filepath.Join(dir, "big.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{{Name: "big", DType: "I32", Shape: []int64{int64(n)}, Data: big}}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "big.tkart")
	m, err := pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	sec := m.Tensors[0].Section
	require.Len(t, sec.PieceCVs, 4)
	return art, sec
}

// b3sum (Debian package b3sum, the BLAKE3 authors' command-line tool)
// hashes the whole file and each section's byte range to the values the
// artifact records.
func TestHashesAgreeWithB3sum(t *testing.T) {
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	_, art := fixtureWith(t, t.TempDir(), pack.Bits2, mixedPolicy(t), nil)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	run := func(data []byte) string {
		cmd := exec.Command(b3sum, "--no-names")
		cmd.Stdin = bytes.NewReader(data)
		out, err := cmd.Output()
		require.NoError(t, err)
		return strings.TrimSpace(string(out))
	}
	whole := blake3.Sum256(b)
	require.Equal(t, run(b), hex.EncodeToString(whole[:]))
	sections := 0
	for _, e := range a.Tensors() {
		for _, s := range e.Sections() {
			require.Equal(t, s.BLAKE3, run(b[s.Offset:s.Offset+s.Length]), e.Name)
			sections++
		}
	}
	require.GreaterOrEqual(t, sections, 4)
	mh := a.ManifestHash()
	require.Equal(t, run(b[a.ManifestOffset():len(b)-pack.TrailerLen]), hex.EncodeToString(mh[:]))
}
