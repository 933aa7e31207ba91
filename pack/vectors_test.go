package pack

import (
	"bytes"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
)

// The test vectors of pack/FORMAT.md live in testdata/vectors: small
// artifacts, vectors.json saying what a reader must produce for each, and a
// README table of the same. `go test ./pack -run TestVectors -update-vectors`
// writes them anew; the test reads the committed files.

var updateVectors = flag.Bool("update-vectors", false, "write testdata/vectors anew")

const vectorsDir = "../testdata/vectors"

// vector is one entry of vectors.json.
type vector struct {
	File    string         `json:"file"`
	Expect  string         `json:"expect"` // "ok" or a failure class of FORMAT.md
	Version string         `json:"version,omitempty"`
	Note    string         `json:"note"`
	Tensors []vectorTensor `json:"tensors,omitempty"`
}

// vectorTensor is what a reader must decode for one tensor.
type vectorTensor struct {
	Name  string  `json:"name"`
	Kind  string  `json:"kind"`
	Codec string  `json:"codec"`
	Shape []int64 `json:"shape"`
	Scale float32 `json:"scale,omitempty"`
	Trits string  `json:"trits,omitempty"` // one of "-0+" per trit, C order
	Hex   string  `json:"hex,omitempty"`   // kept bytes
}

// Failure classes a reader reports (pack/FORMAT.md, "What a reader must reject").
const (
	failNotArtifact  = "not-artifact"
	failVersion      = "version"
	failStructure    = "structure"
	failManifestHash = "manifest-hash"
	failManifest     = "manifest"
	failSectionHash  = "section-hash"
	failPayload      = "payload"
	failCounts       = "counts"
)

// failureClass maps an Open or Check error to its class.
func failureClass(err error) string {
	var fe *FormatError
	switch {
	case err == nil:
		return "ok"
	case errors.Is(err, ErrNotArtifact):
		return failNotArtifact
	case errors.Is(err, ErrVersion):
		return failVersion
	case errors.Is(err, ErrHash) && errors.As(err, &fe) && fe.Where == "manifest":
		return failManifestHash
	case errors.Is(err, ErrHash):
		return failSectionHash
	case errors.Is(err, manifest.ErrInvalid):
		return failManifest
	case errors.Is(err, ErrInvalidCode):
		return failPayload
	case errors.Is(err, ErrTritCounts):
		return failCounts
	case errors.Is(err, ErrStructure):
		return failStructure
	}
	return "error: " + err.Error()
}

// readFully opens and checks an artifact as a runtime that trusts nothing would.
func readFully(path string) (*Artifact, error) {
	a, err := Open(path)
	if err != nil {
		return nil, err
	}
	if err := a.Check(); err != nil {
		a.Close()
		return nil, err
	}
	return a, nil
}

func TestVectors(t *testing.T) {
	if *updateVectors {
		writeVectors(t)
	}
	b, err := os.ReadFile(filepath.Join(vectorsDir, "vectors.json"))
	require.NoError(t, err)
	var vs []vector
	require.NoError(t, json.Unmarshal(b, &vs))
	require.GreaterOrEqual(t, len(vs), 30)
	readme, err := os.ReadFile(filepath.Join(vectorsDir, "README.md"))
	require.NoError(t, err)
	require.Equal(t, vectorsReadme(vs), string(readme), "README.md is out of date: run with -update-vectors")

	for _, v := range vs {
		t.Run(v.File, func(t *testing.T) {
			a, err := readFully(filepath.Join(vectorsDir, v.File))
			require.Equal(t, v.Expect, failureClass(err), "%v", err)
			if err != nil {
				return
			}
			defer a.Close()
			major, minor := a.Version()
			require.Equal(t, v.Version, fmt.Sprintf("%d.%d", major, minor))
			require.Len(t, a.Tensors(), len(v.Tensors))
			for i, e := range a.Tensors() {
				want := v.Tensors[i]
				require.Equal(t, want.Name, e.Name)
				require.Equal(t, want.Codec, e.Codec)
				tn, err := a.Tensor(e.Name)
				require.NoError(t, err)
				if e.Kind == manifest.KindKept {
					p, err := tn.VerifiedPayload()
					require.NoError(t, err)
					require.Equal(t, want.Hex, hex.EncodeToString(p))
					continue
				}
				trits := make([]int8, tn.Len())
				require.NoError(t, tn.DecodeTrits(trits))
				require.Equal(t, want.Trits, tritString(trits))
				vals := make([]float32, tn.Len())
				require.NoError(t, tn.DecodeFloat32(vals))
				for k := range vals {
					require.Equal(t, want.Scale*float32(trits[k]), vals[k])
				}
			}
		})
	}
}

func tritString(trits []int8) string {
	b := make([]byte, len(trits))
	for i, v := range trits {
		b[i] = "-0+"[v+1]
	}
	return string(b)
}

// draft is an artifact taken apart, to be laid out again after an edit.
type draft struct {
	minor    uint16
	m        *manifest.Manifest
	payloads [][]byte
	gap      map[int]int         // extra zero bytes before section i
	json     func([]byte) []byte // edits the manifest bytes
}

func readDraft(t *testing.T, path string) *draft {
	a, err := Open(path)
	require.NoError(t, err)
	defer a.Close()
	b, err := manifest.Encode(a.Manifest())
	require.NoError(t, err)
	m, err := manifest.Decode(b) // a deep copy
	require.NoError(t, err)
	d := &draft{m: m}
	_, minor := a.Version()
	d.minor = uint16(minor)
	for _, e := range m.Tensors {
		tn, err := a.Tensor(e.Name)
		require.NoError(t, err)
		p, err := tn.Payload()
		require.NoError(t, err)
		d.payloads = append(d.payloads, p)
	}
	return d
}

// encode lays the draft out by the rules of FORMAT.md (but for d.gap),
// filling in section offsets, lengths, hashes and totals.
func (d *draft) encode(t *testing.T) []byte {
	out := encodePreamble(d.minor)
	for i, p := range d.payloads {
		out = append(out, make([]byte, alignUp(int64(len(out)))-int64(len(out))+int64(d.gap[i]))...)
		s := &d.m.Tensors[i].Section
		s.Offset, s.Length, s.BLAKE3 = int64(len(out)), int64(len(p)), manifest.HexHash(blake3.Sum256(p))
		out = append(out, p...)
	}
	d.m.ComputeTotals()
	out = append(out, make([]byte, alignUp(int64(len(out)))-int64(len(out)))...)
	body, err := manifest.Encode(d.m)
	require.NoError(t, err)
	if d.json != nil {
		body = d.json(body)
	}
	tr := trailer{manifestOffset: int64(len(out)), manifestLen: int64(len(body)), manifestHash: blake3.Sum256(body)}
	out = append(out, body...)
	return append(out, tr.encode()...)
}

// vectorSource is a checkpoint for the vectors: float tensors named *.w
// are ternarized, the rest kept.
type vectorSource struct {
	tensors []convert.WriteTensor
	floats  map[string][]float32
}

func (s *vectorSource) float(name string, shape []int64, v []float32) {
	if s.floats == nil {
		s.floats = map[string][]float32{}
	}
	s.floats[name] = v
	s.tensors = append(s.tensors, convert.WriteTensor{Name: name, DType: "F32", Shape: shape, Data: f32Bytes(v)})
}

func (s *vectorSource) kept(name, dtype string, shape []int64, data []byte) {
	s.tensors = append(s.tensors, convert.WriteTensor{Name: name, DType: dtype, Shape: shape, Data: data})
}

// build packs the source with codec and returns the artifact bytes and
// what a reader must decode, computed from the source (not by decoding).
func (s *vectorSource) build(t *testing.T, codec Codec) ([]byte, []vectorTensor) {
	dir := t.TempDir()
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, s.tensors, map[string]string{"scenario": "ternkit format test vector"}))
	f, err := convert.Open(src)
	require.NoError(t, err)
	defer f.Close()
	ternaryW, err := convert.ParseRule("*.w=ternary")
	require.NoError(t, err)
	keepRest, err := convert.ParseRule("*=keep")
	require.NoError(t, err)
	policy := &convert.Policy{Rules: []convert.Rule{ternaryW, keepRest}}
	dst := filepath.Join(dir, "v"+Extension)
	m, err := Build(f, dst, Options{Codec: codec, Recipe: convert.DefaultRecipe(), Policy: policy, Tool: "ternkit vectors"})
	require.NoError(t, err)
	var want []vectorTensor
	for i, wt := range s.tensors {
		e := m.Tensors[i]
		vt := vectorTensor{Name: wt.Name, Kind: e.Kind, Codec: e.Codec, Shape: wt.Shape}
		if w, ok := s.floats[wt.Name]; ok {
			trits := make([]int8, len(w))
			q, err := convert.Ternarize(w, convert.Columns(wt.Shape), convert.PerTensor, convert.DefaultRecipe(), trits)
			require.NoError(t, err)
			vt.Scale, vt.Trits = q.Scales[0], tritString(trits)
		} else {
			vt.Hex = hex.EncodeToString(wt.Data)
		}
		want = append(want, vt)
	}
	b, err := os.ReadFile(dst)
	require.NoError(t, err)
	return b, want
}

// sparseWeights are Gaussian weights with the positions of zero trits in
// sparseTrits set to 0: at least 60% zero trits after ternarization.
func sparseWeights(seed uint64, n int) []float32 {
	w := gaussian(newTestRand(seed), n)
	for i, tr := range sparseTrits(seed, n, 0.6) {
		if tr == 0 {
			w[i] = 0
		}
	}
	return w
}

func writeVectors(t *testing.T) {
	dir := t.TempDir()
	var vs []vector
	files := map[string][]byte{}
	add := func(v vector, b []byte) {
		vs = append(vs, v)
		files[v.File] = b
	}
	path := func(name string, b []byte) string {
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, b, 0o644))
		return p
	}
	// Valid artifacts, one per codec and a mix.
	small := func() *vectorSource {
		s := &vectorSource{}
		s.float("layer.w", []int64{2, 7}, []float32{0.9, -1.1, 0.05, 0.6, -0.2, 1.7, -0.8, 0.3, 0.0, -0.45, 1.2, -1.6, 0.1, 0.55})
		s.kept("layer.b", "F16", []int64{3}, []byte{0x00, 0x3c, 0x00, 0xc0, 0xff, 0x7b}) // binary16 1, -2, 65504
		s.float("empty.w", []int64{0, 4}, nil)
		s.kept("step", "I64", []int64{}, []byte{42, 0, 0, 0, 0, 0, 0, 0})
		return s
	}
	okBits2, wantBits2 := small().build(t, Bits2)
	add(vector{File: "ok-bits2.tkart", Expect: "ok", Version: "1.0", Note: "bits2: 14 trits in 3 full bytes and a last byte of 2 trits; an empty ternary tensor; kept F16 and a scalar I64", Tensors: wantBits2}, okBits2)
	okBase3, wantBase3 := small().build(t, Base3)
	add(vector{File: "ok-base3.tkart", Expect: "ok", Version: "1.0", Note: "base3: 14 trits in 2 full bytes and a last byte of 4 trits; an empty ternary tensor; kept F16 and a scalar I64", Tensors: wantBase3}, okBase3)
	ent := &vectorSource{}
	ent.float("sparse.w", []int64{40, 100}, sparseWeights(31, 4000))
	ent.float("tiny.w", []int64{1, 3}, []float32{-0.5, 0.01, 0.7})
	okEntropy, wantEntropy := ent.build(t, Entropy)
	sparseFrame := readDraft(t, path("entropy", okEntropy)).payloads[0]
	require.Equal(t, uint32(2), (uint32(sparseFrame[7])>>1)&3, "a compressed block after a 2-byte content size")
	add(vector{File: "ok-entropy.tkart", Expect: "ok", Version: "1.1", Note: "entropy: 4000 trits with over 60% zeros in a compressed block; 3 trits in a stored block", Tensors: wantEntropy}, okEntropy)
	mix := &vectorSource{}
	mix.float("dense.w", []int64{16, 32}, gaussian(newTestRand(32), 512))
	mix.float("sparse.w", []int64{40, 100}, sparseWeights(33, 4000))
	mix.kept("norm", "BF16", []int64{4}, []byte{0x80, 0x3f, 0x00, 0xc0, 0x80, 0x7f, 0, 0}) // bfloat16 1, -2, +Inf, 0
	okAuto, wantAuto := mix.build(t, Auto)
	require.Equal(t, []string{"base3", "entropy", "raw"}, []string{wantAuto[0].Codec, wantAuto[1].Codec, wantAuto[2].Codec})
	add(vector{File: "ok-auto.tkart", Expect: "ok", Version: "1.1", Note: "written with auto: Gaussian weights stored base3, 60% zeros stored entropy, a kept BF16 vector", Tensors: wantAuto}, okAuto)
	okEmpty, _ := (&vectorSource{}).build(t, Base3)
	add(vector{File: "ok-no-tensors.tkart", Expect: "ok", Version: "1.0", Note: "no tensors: the manifest starts at byte 64"}, okEmpty)

	bits2Path, base3Path, entropyPath := path("bits2", okBits2), path("base3", okBase3), filepath.Join(dir, "entropy")

	// Byte edits of a valid artifact.
	edit := func(file, expect, note string, base []byte, f func(b []byte) []byte) {
		add(vector{File: file, Expect: expect, Note: note}, f(bytes.Clone(base)))
	}
	tr := len(okBits2) - TrailerLen
	m := int(binary.LittleEndian.Uint64(okBits2[tr:]))
	edit("bad-magic.tkart", failNotArtifact, "first preamble byte changed", okBits2, func(b []byte) []byte { b[0] = 'X'; return b })
	edit("bad-major-version.tkart", failVersion, "major version 2", okBits2, func(b []byte) []byte { b[8] = 2; return b })
	edit("bad-minor-version.tkart", failVersion, "minor version 9, above what this specification defines", okBits2, func(b []byte) []byte { b[10] = 9; return b })
	edit("bad-flags.tkart", failStructure, "preamble flag bit 0 set", okBits2, func(b []byte) []byte { b[12] = 1; return b })
	edit("bad-preamble-reserved.tkart", failStructure, "reserved preamble byte 40 is 1", okBits2, func(b []byte) []byte { b[40] = 1; return b })
	edit("bad-trailer-magic.tkart", failStructure, "last byte of the trailer magic changed", okBits2, func(b []byte) []byte { b[len(b)-1] ^= 1; return b })
	edit("bad-trailer-reserved.tkart", failStructure, "reserved trailer byte 48 is 1", okBits2, func(b []byte) []byte { b[tr+48] = 1; return b })
	edit("bad-manifest-offset.tkart", failStructure, "trailer's manifest offset 64 bytes too far", okBits2, func(b []byte) []byte {
		binary.LittleEndian.PutUint64(b[tr:], uint64(m+64))
		return b
	})
	edit("bad-truncated.tkart", failStructure, "last byte missing", okBits2, func(b []byte) []byte { return b[:len(b)-1] })
	edit("bad-appended.tkart", failStructure, "one zero byte after the trailer", okBits2, func(b []byte) []byte { return append(b, 0) })
	edit("bad-short-file.tkart", failStructure, "127 bytes: shorter than preamble and trailer", okBits2, func(b []byte) []byte { return b[:127] })
	edit("bad-manifest-hash.tkart", failManifestHash, "one manifest byte changed, trailer hash not updated", okBits2, func(b []byte) []byte {
		i := m + bytes.Index(b[m:], []byte(`"ternkit vectors"`)) + 1
		b[i] = 'T'
		return b
	})
	edit("bad-padding.tkart", failStructure, "a padding byte after the first section is 1", okBits2, func(b []byte) []byte { b[64+4] = 1; return b })
	edit("bad-section-hash.tkart", failSectionHash, "first payload byte changed to another valid bits2 byte, hash not updated", okBits2, func(b []byte) []byte { b[64] ^= 0x01; return b })

	// Edits of the taken-apart artifact, laid out again with valid hashes
	// so that only the named rule breaks.
	redo := func(file, expect, note, from string, f func(d *draft)) {
		d := readDraft(t, from)
		f(d)
		add(vector{File: file, Expect: expect, Note: note}, d.encode(t))
	}
	redo("bad-minor-for-codec.tkart", failVersion, "entropy sections in a file that says version 1.0", entropyPath, func(d *draft) { d.minor = 0 })
	redo("bad-minor-above-features.tkart", failStructure, "version 1.1 for a file using only 1.0 features", bits2Path, func(d *draft) { d.minor = 1 })
	redo("bad-unknown-key.tkart", failManifest, `manifest tensor entry with an unknown key "note"`, bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`{"name":"layer.w",`), []byte(`{"name":"layer.w","note":"x",`), 1)
		}
	})
	redo("bad-key-case.tkart", failManifest, `tensor key "Name" where "name" is meant (keys match exactly)`, bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`{"name":"layer.w",`), []byte(`{"Name":"layer.w",`), 1)
		}
	})
	redo("bad-duplicate-key.tkart", failManifest, `tensor entry with "codec" twice, the last one valid`, bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"codec":"bits2"`), []byte(`"codec":"base3","codec":"bits2"`), 1)
		}
	})
	redo("bad-duplicate-name.tkart", failManifest, "two tensors named layer.w", bits2Path, func(d *draft) { d.m.Tensors[1].Name = "layer.w" })
	redo("bad-codec-name.tkart", failManifest, `ternary tensor with codec "base4"`, base3Path, func(d *draft) { d.m.Tensors[0].Codec = "base4" })
	redo("bad-section-length.tkart", failManifest, "bits2 section of 5 bytes for 14 trits (needs 4)", bits2Path, func(d *draft) { d.payloads[0] = append(d.payloads[0], 0) })
	redo("bad-section-offset.tkart", failStructure, "64 zero bytes before the second section, which the manifest locates there", bits2Path, func(d *draft) {
		d.gap = map[int]int{1: 64}
	})
	redo("bad-totals.tkart", failManifest, "totals.ternary_params one too many", bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"ternary_params":14`), []byte(`"ternary_params":15`), 1)
		}
	})
	redo("bad-counts.tkart", failCounts, "manifest trit counts move one trit from zero to pos (still summing to 14)", bits2Path, func(d *draft) {
		d.m.Tensors[0].Trits.Zero--
		d.m.Tensors[0].Trits.Pos++
	})
	redo("bad-bits2-code3.tkart", failPayload, "bits2 byte 0 is 0xff (code 3)", bits2Path, func(d *draft) { d.payloads[0][0] = 0xff })
	redo("bad-bits2-padding.tkart", failPayload, "bits2 last byte holds 2 trits but its third pair is 1", bits2Path, func(d *draft) { d.payloads[0][3] |= 1 << 4 })
	redo("bad-base3-243.tkart", failPayload, "base3 byte 0 is 243", base3Path, func(d *draft) { d.payloads[0][0] = 243 })
	redo("bad-base3-padding.tkart", failPayload, "base3 last byte holds 4 trits but is 81 (must be below 3^4)", base3Path, func(d *draft) { d.payloads[0][2] = 81 })
	redo("bad-entropy-content-size.tkart", failPayload, "tiny.w frame claims 2 content bytes, 3 trits need 1", entropyPath, func(d *draft) { d.payloads[1][5] = 2 })
	redo("bad-entropy-checksum-flag.tkart", failPayload, "tiny.w frame descriptor has the checksum flag", entropyPath, func(d *draft) { d.payloads[1][4] |= 0x04 })
	redo("bad-entropy-after-frame.tkart", failPayload, "tiny.w section has one byte after its frame", entropyPath, func(d *draft) { d.payloads[1] = append(d.payloads[1], 0) })
	redo("bad-entropy-magic.tkart", failPayload, "sparse.w frame magic changed", entropyPath, func(d *draft) { d.payloads[0][0] ^= 1 })
	redo("bad-entropy-content.tkart", failPayload, "tiny.w frame holds base3 byte 27 for 3 trits (must be below 27)", entropyPath, func(d *draft) {
		d.payloads[1] = appendStoredFrame(nil, []byte{27})
	})

	require.NoError(t, os.MkdirAll(vectorsDir, 0o755))
	old, _ := filepath.Glob(filepath.Join(vectorsDir, "*.tkart"))
	for _, f := range old {
		require.NoError(t, os.Remove(f))
	}
	for name, b := range files {
		require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, name), b, 0o644))
	}
	js, err := json.MarshalIndent(vs, "", "  ")
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, "vectors.json"), append(js, '\n'), 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, "README.md"), []byte(vectorsReadme(vs)), 0o644))
}

// vectorsReadme renders the table of testdata/vectors/README.md.
func vectorsReadme(vs []vector) string {
	var b strings.Builder
	b.WriteString(`# Test vectors for pack/FORMAT.md

Each file is an artifact; the table says what a reader must produce for it:
success with the listed tensors (trits written one character each, "-" for
−1, "0" and "+" for +1, in C order; kept tensors as hex bytes), or the class
of failure from FORMAT.md, "What a reader must reject". vectors.json holds
the same in full, for programs. A failure vector breaks exactly one rule;
hashes and layout are otherwise valid.

Written by ` + "`go test ./pack -run TestVectors -update-vectors`" + `; checked by
` + "`go test ./pack`" + ` (the Go reader) and by testdata/tkart_read.py (a reader
written from FORMAT.md alone), run from ` + "`go test ./cmd/ternkit`" + `.

| file | reader must produce | what it holds |
|---|---|---|
`)
	for _, v := range vs {
		res := "failure: **" + v.Expect + "**"
		if v.Expect == "ok" {
			var parts []string
			for _, tn := range v.Tensors {
				val := tn.Hex
				if tn.Kind == manifest.KindTernary {
					val = tn.Trits
					if val == "" {
						val = "(none)"
					}
				}
				if len(val) > 24 {
					val = val[:24] + "…"
				}
				parts = append(parts, fmt.Sprintf("`%s` %s %v `%s`", tn.Name, tn.Codec, tn.Shape, val))
			}
			res = "success, version " + v.Version
			if len(parts) > 0 {
				res += ": " + strings.Join(parts, "; ")
			}
		}
		fmt.Fprintf(&b, "| %s | %s | %s |\n", v.File, res, v.Note)
	}
	return b.String()
}
