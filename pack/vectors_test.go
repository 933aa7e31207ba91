package pack

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"math/big"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/testweights"
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
	// Companions are the companion files a reader must return (format 1.3).
	Companions []vectorCompanion `json:"companions,omitempty"`
}

// vectorCompanion is what a reader must return for one companion file.
type vectorCompanion struct {
	Name   string `json:"name"`
	Length int64  `json:"length"`
	SHA256 string `json:"sha256"` // of the file's bytes
}

// vectorTensor is what a reader must decode for one tensor.
type vectorTensor struct {
	Name        string    `json:"name"`
	Kind        string    `json:"kind"`
	Codec       string    `json:"codec"`
	Shape       []int64   `json:"shape"`
	DType       string    `json:"dtype,omitempty"`       // kept: the stored dtype
	Granularity string    `json:"granularity,omitempty"` // ternary and int8
	Exact       bool      `json:"exact,omitempty"`
	Scale       float32   `json:"scale,omitempty"`  // ternary at tensor granularity
	Scales      []float32 `json:"scales,omitempty"` // the scales section, one per group
	Trits       string    `json:"trits,omitempty"`  // one of "-0+" per trit, C order
	Hex         string    `json:"hex,omitempty"`    // kept bytes, or int8 codes
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
				checkVectorTensor(t, a, e, v.Tensors[i])
			}
			require.Len(t, a.Companions(), len(v.Companions))
			for i, c := range a.Companions() {
				b, err := a.Companion(c.Name)
				require.NoError(t, err)
				require.Equal(t, v.Companions[i], companionOf(c.Name, b))
			}
		})
	}
}

// checkVectorTensor requires the Go reader to decode e as want says.
func checkVectorTensor(t *testing.T, a *Artifact, e manifest.Tensor, want vectorTensor) {
	t.Helper()
	require.Equal(t, want.Name, e.Name)
	require.Equal(t, want.Kind, e.Kind)
	require.Equal(t, want.Codec, e.Codec)
	require.Equal(t, want.Exact, e.Exact, e.Name)
	tn, err := a.Tensor(e.Name)
	require.NoError(t, err)
	if e.Kind == manifest.KindKept {
		require.Equal(t, want.DType, e.DType)
		p, err := tn.VerifiedPayload()
		require.NoError(t, err)
		require.Equal(t, want.Hex, hex.EncodeToString(p))
		return
	}
	require.Equal(t, want.Granularity, e.Granularity.String())
	codes := make([]int8, tn.Len())
	if e.Kind == manifest.KindTernary {
		require.NoError(t, tn.DecodeTrits(codes))
		require.Equal(t, want.Trits, tritString(codes))
	} else {
		p, err := tn.VerifiedPayload()
		require.NoError(t, err)
		require.Equal(t, want.Hex, hex.EncodeToString(p))
		copy(unsafeInt8Bytes(codes), p)
	}
	scales, err := tn.Scales()
	require.NoError(t, err)
	switch {
	case e.Scales == nil:
		require.Equal(t, []float32{want.Scale}, scales)
	case len(want.Scales) == 0:
		require.Empty(t, scales, "no groups, no scales")
	default:
		require.Equal(t, want.Scales, scales)
	}
	vals := make([]float32, tn.Len())
	require.NoError(t, tn.DecodeFloat32(vals))
	for k := range vals {
		require.Equal(t, scales[k/tn.GroupSize()]*float32(codes[k]), vals[k])
	}
}

func companionOf(name string, b []byte) vectorCompanion {
	sum := sha256.Sum256(b)
	return vectorCompanion{Name: name, Length: int64(len(b)), SHA256: hex.EncodeToString(sum[:])}
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
	scales   [][]byte            // nil for a tensor without a scales section
	comps    [][]byte            // the companions' bytes
	gap      map[int]int         // extra zero bytes before tensor i's payload
	compGap  map[int]int         // extra zero bytes before companion i
	manGap   int                 // extra zero bytes before the manifest
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
		var sc []byte
		if e.Scales != nil {
			sc = make([]byte, e.Scales.Length)
			_, err := a.ReaderAt().ReadAt(sc, e.Scales.Offset)
			require.NoError(t, err)
		}
		d.scales = append(d.scales, sc)
	}
	for _, c := range m.Companions {
		b, err := a.Companion(c.Name)
		require.NoError(t, err)
		d.comps = append(d.comps, b)
	}
	return d
}

// encode lays the draft out by the rules of FORMAT.md (but for d.gap),
// filling in section offsets, lengths, hashes and totals.
func (d *draft) encode(t *testing.T) []byte {
	out := encodePreamble(d.minor)
	place := func(s *manifest.Section, p []byte, gap int) {
		out = append(out, make([]byte, alignUp(int64(len(out)))-int64(len(out))+int64(gap))...)
		s.Offset, s.Length, s.BLAKE3 = int64(len(out)), int64(len(p)), manifest.HexHash(blake3.Sum256(p))
		s.Chunks, s.PieceCVs = nil, nil
		if manifest.NumChunks(s.Length) > 0 {
			if d.minor >= pieceCVsSince {
				s.PieceCVs = hashSection(p).PieceCVs
			} else {
				s.Chunks = chunkHashes(p)
			}
		}
		out = append(out, p...)
	}
	for i, p := range d.payloads {
		place(&d.m.Tensors[i].Section, p, d.gap[i])
		if d.scales[i] != nil {
			place(d.m.Tensors[i].Scales, d.scales[i], 0)
		}
	}
	for i, p := range d.comps {
		place(&d.m.Companions[i].Section, p, d.compGap[i])
	}
	d.m.ComputeTotals()
	out = append(out, make([]byte, alignUp(int64(len(out)))-int64(len(out))+int64(d.manGap))...)
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
	actions map[string]string // policy action by tensor name; floats default to ternary
	// recipe is the recipe built with; the zero value is the default recipe
	// without the sum key (sequential order, format 1.0), as the vectors of
	// 1.0 and 1.1 were written
	recipe convert.Recipe
	// companions are carried in this order
	companions []vectorFile
}

// vectorFile is a companion file of a vector's checkpoint.
type vectorFile struct {
	name string
	data []byte
}

func (s *vectorSource) recipeOrDefault() convert.Recipe {
	if s.recipe == (convert.Recipe{}) {
		return sequentialRecipe()
	}
	return s.recipe
}

func (s *vectorSource) float(name string, shape []int64, v []float32) {
	s.floatAs(name, shape, v, convert.ActTernary)
}

// floatAs adds an F32 tensor that the policy gives action.
func (s *vectorSource) floatAs(name string, shape []int64, v []float32, action string) {
	if s.floats == nil {
		s.floats, s.actions = map[string][]float32{}, map[string]string{}
	}
	s.floats[name], s.actions[name] = v, action
	s.tensors = append(s.tensors, convert.WriteTensor{Name: name, DType: "F32", Shape: shape, Data: testweights.F32Bytes(v)})
}

func (s *vectorSource) kept(name, dtype string, shape []int64, data []byte) {
	s.tensors = append(s.tensors, convert.WriteTensor{Name: name, DType: dtype, Shape: shape, Data: data})
}

// build packs the source with codec and returns the artifact bytes and
// what a reader must decode, computed from the source (not by decoding).
func (s *vectorSource) build(t *testing.T, codec Codec) ([]byte, []vectorTensor) {
	dir := t.TempDir()
	src := filepath.Join(dir, "src.safetensors")
	writeSafetensors(t, src, s.tensors, map[string]string{"scenario": "ternkit format test vector"})
	f, err := convert.Open(src)
	require.NoError(t, err)
	defer f.Close()
	policy := &convert.Policy{}
	for _, wt := range s.tensors {
		action, ok := s.actions[wt.Name]
		if !ok {
			action = convert.ActKeep
		}
		r, err := convert.ParseRule(wt.Name + "=" + action)
		require.NoError(t, err)
		policy.Rules = append(policy.Rules, r)
	}
	var comps []Companion
	for _, c := range s.companions {
		p := filepath.Join(dir, c.name)
		require.NoError(t, os.WriteFile(p, c.data, 0o644))
		comps = append(comps, Companion{Name: c.name, Path: p})
	}
	dst := filepath.Join(dir, "v"+Extension)
	m, err := Build(f, dst, Options{Codec: codec, Recipe: s.recipeOrDefault(), Policy: policy, Tool: "ternkit vectors", Companions: comps})
	require.NoError(t, err)
	var want []vectorTensor
	for i, wt := range s.tensors {
		want = append(want, s.expect(t, wt, m.Tensors[i]))
	}
	b, err := os.ReadFile(dst)
	require.NoError(t, err)
	return b, want
}

// wantCompanions is what a reader must return for the source's companions.
func (s *vectorSource) wantCompanions() []vectorCompanion {
	var out []vectorCompanion
	for _, c := range s.companions {
		out = append(out, companionOf(c.name, c.data))
	}
	return out
}

// writeSafetensors writes tensors in order by the published layout of
// safetensors (8-byte little-endian header length, JSON header padded with
// spaces, data), for any dtype string, a dtype the format does not list
// included.
func writeSafetensors(t *testing.T, path string, tensors []convert.WriteTensor, metadata map[string]string) {
	header := map[string]any{"__metadata__": metadata}
	var data []byte
	for _, wt := range tensors {
		header[wt.Name] = map[string]any{"dtype": wt.DType, "shape": append([]int64{}, wt.Shape...), "data_offsets": []int{len(data), len(data) + len(wt.Data)}}
		data = append(data, wt.Data...)
	}
	h, err := json.Marshal(header)
	require.NoError(t, err)
	for len(h)%8 != 0 {
		h = append(h, ' ')
	}
	out := binary.LittleEndian.AppendUint64(nil, uint64(len(h)))
	require.NoError(t, os.WriteFile(path, append(append(out, h...), data...), 0o644))
}

// expect is what a reader must decode for source tensor wt, stored as e
// says (kind, codec), computed from the source and the quantizers rather
// than by decoding the artifact.
func (s *vectorSource) expect(t *testing.T, wt convert.WriteTensor, e manifest.Tensor) vectorTensor {
	vt := vectorTensor{Name: wt.Name, Kind: e.Kind, Codec: e.Codec, Shape: wt.Shape}
	w, ok := s.floats[wt.Name]
	if !ok {
		vt.DType, vt.Hex = wt.DType, hex.EncodeToString(wt.Data)
		return vt
	}
	a, err := convert.ParseAction(s.actions[wt.Name])
	require.NoError(t, err)
	cols := convert.Columns(wt.Shape)
	codes := make([]int8, len(w))
	kind := manifest.KindKept
	switch a.Kind {
	case convert.ActTernary:
		kind = manifest.KindTernary
		q, err := convert.Ternarize(w, cols, a.Granularity, s.recipeOrDefault(), codes)
		require.NoError(t, err)
		vt.Granularity, vt.Exact, vt.Trits = a.Granularity.String(), q.Exact, tritString(codes)
		if a.Granularity.Kind == convert.GranTensor {
			vt.Scale = q.Scales[0]
		} else {
			vt.Scales = q.Scales
		}
	case convert.ActInt8:
		kind = manifest.KindInt8
		scales, _, err := convert.QuantizeInt8Rows(w, cols, codes)
		require.NoError(t, err)
		vt.Granularity, vt.Scales, vt.Hex = convert.GranRow, scales, hex.EncodeToString(int8Bytes(codes))
	default:
		vt.DType = a.KeptDType(wt.DType)
		b, err := convert.EncodeFloat32(nil, vt.DType, w)
		require.NoError(t, err)
		vt.Hex = hex.EncodeToString(b)
	}
	require.Equal(t, kind, e.Kind, wt.Name)
	return vt
}

// sparseWeights are Gaussian weights with the positions of zero trits in
// sparseTrits set to 0: at least 60% zero trits after ternarization.
func sparseWeights(seed uint64, n int) []float32 {
	w := testweights.Gaussian(newTestRand(seed), n)
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
	mix.float("dense.w", []int64{16, 32}, testweights.Gaussian(newTestRand(32), 512))
	mix.float("sparse.w", []int64{40, 100}, sparseWeights(33, 4000))
	mix.kept("norm", "BF16", []int64{4}, []byte{0x80, 0x3f, 0x00, 0xc0, 0x80, 0x7f, 0, 0}) // bfloat16 1, -2, +Inf, 0
	okAuto, wantAuto := mix.build(t, Auto)
	require.Equal(t, []string{"base3", "entropy", "raw"}, []string{wantAuto[0].Codec, wantAuto[1].Codec, wantAuto[2].Codec})
	add(vector{File: "ok-auto.tkart", Expect: "ok", Version: "1.1", Note: "written with auto: Gaussian weights stored base3, 60% zeros stored entropy, a kept BF16 vector", Tensors: wantAuto}, okAuto)
	okEmpty, _ := (&vectorSource{}).build(t, Base3)
	add(vector{File: "ok-no-tensors.tkart", Expect: "ok", Version: "1.0", Note: "no tensors: the manifest starts at byte 64"}, okEmpty)

	// Scales sections: row and group granularity, int8.
	rows := &vectorSource{}
	rows.floatAs("rows.w", []int64{3, 6}, []float32{0.9, -1.1, 0.05, 0.6, -0.2, 1.7, 0, 0, 0, 0, 0, 0, 0.01, -0.03, 0.02, 0.04, -0.015, 0.0}, "ternary:row")
	okRow, wantRow := rows.build(t, Bits2)
	add(vector{File: "ok-row.tkart", Expect: "ok", Version: "1.0", Note: "ternary at row granularity: 3 rows of 6, the second all zero (its scale is the recipe's for gamma 0), the third 100 times smaller; 12 bytes of float32 scales after the payload", Tensors: wantRow}, okRow)
	groups := &vectorSource{}
	groups.floatAs("groups.w", []int64{2, 8}, []float32{0.9, -1.1, 0.05, 0.6, 4, -6, 0.5, 3, -0.2, 0.1, 0.3, -0.4, 0, 0, 0.2, 0}, "ternary:group:4")
	okGroup, wantGroup := groups.build(t, Base3)
	add(vector{File: "ok-group.tkart", Expect: "ok", Version: "1.0", Note: "ternary at group:4 granularity: 2 rows of 8, 4 groups of 4 elements, trit i dequantized by scale ⌊i/4⌋", Tensors: wantGroup}, okGroup)
	i8 := &vectorSource{}
	i8.floatAs("embed", []int64{3, 4}, []float32{1.27, -0.5, 0.005, 0.635, 0, 0, 0, 0, -254, 127, 1, -0.999}, convert.ActInt8)
	okInt8, wantInt8 := i8.build(t, Bits2)
	add(vector{File: "ok-int8.tkart", Expect: "ok", Version: "1.0", Note: "int8, per-row absmax: 3 rows of 4 (the second all zero, scale 0); codes as hex bytes, 12 bytes of scales after them", Tensors: wantInt8}, okInt8)
	conv := &vectorSource{}
	conv.floatAs("norm.f16", []int64{5}, []float32{1, -2, 65504, 1.0 / (1 << 24), 0.1}, convert.ActKeepF16)
	conv.floatAs("norm.bf16", []int64{3}, []float32{1, -2, 0.1}, convert.ActKeepBF16)
	conv.kept("scale.f8", "F8_E4M3", []int64{4}, []byte{0x38, 0xb8, 0x7e, 0x01}) // 1, -1, 448, 2^-9
	conv.kept("blob", "Q4_BLOCK", []int64{2}, []byte{0xde, 0xad, 0xbe})
	okConv, wantConv := conv.build(t, Bits2)
	add(vector{File: "ok-keep-f16.tkart", Expect: "ok", Version: "1.0", Note: "kept F32 converted to F16 (1, -2, 65504, 2^-24, 0.1 rounded) and to BF16; a kept F8_E4M3 vector; an unknown dtype kept byte for byte (3 bytes for 2 elements)", Tensors: wantConv}, okConv)
	ex := &vectorSource{}
	ex.float("exact.w", []int64{2, 4}, []float32{0.25, 0, -0.25, 0.25, 0, 0, -0.25, 0})
	ex.floatAs("exact-row.w", []int64{3, 2}, []float32{3, -3, 0, 0, 0.5, 0}, "ternary:row")
	okExact, wantExact := ex.build(t, Base3)
	require.True(t, wantExact[0].Exact && wantExact[1].Exact, "the source is already ternary")
	add(vector{File: "ok-exact.tkart", Expect: "ok", Version: "1.0", Note: "tensors already c × {-1, 0, +1}: exact, scale 0.25 (tensor) and 3, recipe's, 0.5 (rows)", Tensors: wantExact}, okExact)

	// gamma summed in 16 strided partial sums: the recipe's sum key, 1.2
	str := &vectorSource{recipe: stridedRecipe()}
	str.float("strided.w", []int64{4, 10}, testweights.Gaussian(newTestRand(34), 40))
	okStrided, wantStrided := str.build(t, Base3)
	add(vector{File: "ok-strided16.tkart", Expect: "ok", Version: "1.2", Note: `recipe with "sum": "strided16" (gamma summed in 16 strided partial sums), so format 1.2`, Tensors: wantStrided}, okStrided)
	stridedPath := path("strided", okStrided)

	// Companion files (format 1.3): a model config, a licence and an
	// empty file, after the tensor's sections.
	comp := &vectorSource{recipe: stridedRecipe(), companions: []vectorFile{
		{"config.json", []byte(`{"hidden_size": 8, "num_hidden_layers": 1, "vocab_size": 12}` + "\n")},
		{"LICENSE", []byte("Fernmoss Seed Vault scanner weights. Internal use only.\n")},
		{"NOTICE", nil},
	}}
	comp.float("layer.w", []int64{2, 5}, []float32{0.9, -1.1, 0.05, 0.6, -0.2, 1.7, -0.8, 0.3, 0.0, -0.45})
	okComp, wantComp := comp.build(t, Base3)
	add(vector{File: "ok-companions.tkart", Expect: "ok", Version: "1.3", Note: "three companion files after the tensor's section: config.json, LICENSE, and NOTICE of 0 bytes (its section takes no space)", Tensors: wantComp, Companions: comp.wantCompanions()}, okComp)
	compPath := path("companions", okComp)

	// A valid artifact whose config contradicts its tensors: readers accept
	// it (companions are opaque to the format); ternkit verify warns.
	mis := &vectorSource{recipe: stridedRecipe(), companions: []vectorFile{
		{"config.json", []byte(`{"hidden_size": 8, "intermediate_size": 16, "num_hidden_layers": 1, "num_attention_heads": 2, "num_key_value_heads": 2, "head_dim": 4, "vocab_size": 16, "tie_word_embeddings": false}` + "\n")},
	}}
	mis.kept("model.embed_tokens.weight", "F16", []int64{12, 8}, make([]byte, 2*12*8))
	mis.float("model.layers.0.self_attn.q_proj.weight", []int64{8, 8}, testweights.Gaussian(newTestRand(35), 64))
	mis.kept("lm_head.weight", "F16", []int64{12, 8}, make([]byte, 2*12*8))
	okMis, wantMis := mis.build(t, Base3)
	add(vector{File: "ok-config-mismatch.tkart", Expect: "ok", Version: "1.3", Note: "valid, but its config.json says vocab_size 16 where the embedding and the output head have 12 rows: ternkit verify warns (config cross-check), the format does not look inside companions", Tensors: wantMis, Companions: mis.wantCompanions()}, okMis)

	// A section over 2^22 bytes, with piece hashes: a companion of 2^22 +
	// 5000 bytes of a 256-byte pattern (compressible, small in git).
	bigData := make([]byte, manifest.ChunkSize+5000)
	for i := range bigData {
		bigData[i] = byte(i * 7)
	}
	bigSrc := &vectorSource{recipe: stridedRecipe(), companions: []vectorFile{{"vocab.txt", bigData}}}
	okBig, _ := bigSrc.build(t, Base3)
	add(vector{File: "ok-chunks.tkart", Expect: "ok", Version: "1.3", Note: "a companion section of 4199304 bytes (2^22 + 5000): two piece hashes, the last piece 5000 bytes", Companions: bigSrc.wantCompanions()}, okBig)
	bigPath := path("big", okBig)

	bits2Path, base3Path, entropyPath := path("bits2", okBits2), path("base3", okBase3), filepath.Join(dir, "entropy")
	rowPath, int8Path, convPath := path("row", okRow), path("int8", okInt8), path("conv", okConv)

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
	rowScales := readDraft(t, rowPath).m.Tensors[0].Scales
	edit("bad-scales-hash.tkart", failSectionHash, "rows.w scales: lowest bit of the first scale flipped (still a valid scale), hash not updated", okRow, func(b []byte) []byte {
		b[rowScales.Offset] ^= 1
		return b
	})
	edit("bad-scales-padding.tkart", failStructure, "rows.w scales: the padding byte right after its 12 bytes is 1", okRow, func(b []byte) []byte {
		b[rowScales.Offset+rowScales.Length] = 1
		return b
	})
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
	redo("bad-minor-for-sum.tkart", failVersion, `the recipe's "sum" key (format 1.2) in a file that says version 1.1`, stridedPath, func(d *draft) { d.minor = 1 })
	redo("bad-sum-order.tkart", failManifest, `recipe "sum": "pairwise", an order this version does not define`, stridedPath, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"sum":"strided16"`), []byte(`"sum":"pairwise"`), 1)
		}
	})
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

	setScale := func(d *draft, i int, v float32) {
		binary.LittleEndian.PutUint32(d.scales[0][4*i:], math.Float32bits(v))
	}
	redo("bad-scales-length.tkart", failManifest, "rows.w scales section of 16 bytes for 3 rows (needs 12)", rowPath, func(d *draft) { d.scales[0] = append(d.scales[0], 0, 0, 0x80, 0x3f) })
	redo("bad-scale-zero.tkart", failPayload, "rows.w scale 1 is 0 (ternary scales are > 0)", rowPath, func(d *draft) { setScale(d, 1, 0) })
	redo("bad-scale-nan.tkart", failPayload, "rows.w scale 2 is NaN", rowPath, func(d *draft) { setScale(d, 2, float32(math.NaN())) })
	redo("bad-int8-scale-negative.tkart", failPayload, "embed scale 0 is -0.01 (int8 scales are ≥ 0)", int8Path, func(d *draft) { setScale(d, 0, -0.01) })
	redo("bad-int8-code.tkart", failPayload, "embed code 0 is 0x80 (-128; codes are -127..127)", int8Path, func(d *draft) { d.payloads[0][0] = 0x80 })
	redo("bad-int8-granularity.tkart", failManifest, `int8 tensor with granularity "group:2"`, int8Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"granularity":"row"`), []byte(`"granularity":"group:2"`), 1)
		}
	})
	redo("bad-group-leading-zero.tkart", failManifest, `ternary granularity "group:04" (group sizes are written without leading zeros)`, path("group", okGroup), func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"granularity":"group:4"`), []byte(`"granularity":"group:04"`), 1)
		}
	})
	redo("bad-dtype-conversion.tkart", failManifest, "norm.f16 claims dtype I16 from F32 (conversions are to F16, BF16 or F32)", convPath, func(d *draft) { d.m.Tensors[0].DType = "I16" })
	redo("bad-exact-on-kept.tkart", failManifest, `kept tensor with "exact": true`, convPath, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`{"name":"scale.f8",`), []byte(`{"name":"scale.f8","exact":true,`), 1)
		}
	})

	// Companion rules.
	redo("bad-minor-for-companions.tkart", failVersion, "companions (format 1.3) in a file that says version 1.2", compPath, func(d *draft) { d.minor = 2 })
	compSecs := readDraft(t, compPath).m.Companions
	edit("bad-companion-hash.tkart", failSectionHash, "LICENSE: first byte changed, hash not updated", okComp, func(b []byte) []byte {
		b[compSecs[1].Section.Offset] ^= 1
		return b
	})
	edit("bad-companion-padding.tkart", failStructure, "the padding byte right after config.json is 1", okComp, func(b []byte) []byte {
		b[compSecs[0].Section.Offset+compSecs[0].Section.Length] = 1
		return b
	})
	redo("bad-companion-offset.tkart", failStructure, "64 zero bytes before LICENSE, which the manifest locates there", compPath, func(d *draft) {
		d.compGap = map[int]int{1: 64}
	})
	redo("bad-companion-name-path.tkart", failManifest, `companion named "../config.json" (names are base names)`, compPath, func(d *draft) { d.m.Companions[0].Name = "../config.json" })
	redo("bad-companion-name-dotdot.tkart", failManifest, `companion named ".."`, compPath, func(d *draft) { d.m.Companions[2].Name = ".." })
	redo("bad-companion-name-control.tkart", failManifest, `companion named "NOTICE\u0007" (a control character)`, compPath, func(d *draft) { d.m.Companions[2].Name = "NOTICE\a" })
	redo("bad-companion-name-case.tkart", failManifest, `companions "LICENSE" and "license" (one file where case is ignored)`, compPath, func(d *draft) { d.m.Companions[2].Name = "license" })
	redo("bad-companions-empty.tkart", failManifest, `"companions": [] (absent rather than empty)`, stridedPath, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`,"totals":`), []byte(`,"companions":[],"totals":`), 1)
		}
	})
	redo("bad-lone-surrogate.tkart", failManifest, `"tool" holds the escape \ud800 with no low surrogate after it`, bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"ternkit vectors"`), []byte(`"ternkit \ud800vectors"`), 1)
		}
	})
	bigChunks := readDraft(t, bigPath).m.Companions[0].Section.Chunks
	redo("bad-chunk-hash.tkart", failSectionHash, "vocab.txt: piece hash 1 replaced by piece hash 0 (the section's own BLAKE3 holds)", bigPath, func(d *draft) {
		d.json = func(b []byte) []byte {
			return bytes.Replace(b, []byte(`"`+bigChunks[1]+`"`), []byte(`"`+bigChunks[0]+`"`), 1)
		}
	})

	// Rules stated per key: required keys, null, integers, numbers.
	inject := func(file, expect, note, from, old, new string) {
		redo(file, expect, note, from, func(d *draft) {
			d.json = func(b []byte) []byte {
				require.True(t, bytes.Contains(b, []byte(old)), "%s: %s not in the manifest", file, old)
				return bytes.Replace(b, []byte(old), []byte(new), 1)
			}
		})
	}
	inject("bad-null-key.tkart", failManifest, `"created": null (no key takes null; an optional key is left out)`, bits2Path, `"tool":`, `"created":null,"tool":`)
	inject("bad-missing-key.tkart", failManifest, `totals without "kept_params" (required, even where its value would be 0)`, path("row", okRow), `"kept_params":0,`, ``)
	inject("bad-stats-empty.tkart", failManifest, `layer.w "stats": {} (its five keys are required)`, bits2Path, `"stats":{"zero_fraction"`, `"stats":{},"x":{"zero_fraction"`)
	inject("bad-integer-fraction.tkart", failManifest, `shape [2, 7.0]: an integer has no fraction part`, bits2Path, `"shape":[2,7]`, `"shape":[2,7.0]`)
	inject("bad-integer-exponent.tkart", failManifest, `shape [2, 7e0]: an integer has no exponent`, bits2Path, `"shape":[2,7]`, `"shape":[2,7e0]`)
	inject("bad-number-range.tkart", failManifest, `stats max_abs_err 1e400, beyond the float64 range`, bits2Path, `"max_abs_err":`, `"max_abs_err":1e400,"x":`)
	redo("bad-source-dtype.tkart", failManifest, `layer.w ternary from source dtype "I32" (only float dtypes are quantized)`, bits2Path, func(d *draft) { d.m.Tensors[0].SourceDType = "I32" })
	redo("bad-negative-size.tkart", failManifest, "source file of -1 bytes (totals.source_bytes agreeing)", bits2Path, func(d *draft) { d.m.Source.Files[0].Bytes = -1 })
	redo("bad-shape-overflow.tkart", failManifest, "empty.w shape [4294967296, 4294967296, 0]: no element, but the nonzero dimensions' product overflows", bits2Path, func(d *draft) {
		d.m.Tensors[2].Shape = []int64{1 << 32, 1 << 32, 0}
	})
	redo("bad-created-year-zero.tkart", failManifest, `created "0000-01-01T00:00:00Z" (years are 0001 to 9999)`, bits2Path, func(d *draft) { d.m.Created = "0000-01-01T00:00:00Z" })
	redo("bad-created-leap-second.tkart", failManifest, `created "2016-12-31T23:59:60Z" (a leap second; seconds are 00 to 59)`, bits2Path, func(d *draft) { d.m.Created = "2016-12-31T23:59:60Z" })
	redo("bad-manifest-start.tkart", failStructure, "64 zero bytes between the last section's padding and the manifest, the trailer locating the manifest after them", bits2Path, func(d *draft) { d.manGap = 64 })
	add(vector{File: "bad-tiny-file.tkart", Expect: failStructure, Note: `5 bytes "TKART": shorter than preamble and trailer, whatever its first bytes`}, []byte("TKART"))

	// A scale written as a decimal whose float64 rounding lies on a float32
	// tie: rounded once, directly, to float32 it is the upper neighbour.
	bits2Draft := readDraft(t, bits2Path)
	a32 := bits2Draft.m.Tensors[0].Scale
	lo, hi := a32, math.Nextafter32(a32, 2)
	if math.Float32bits(lo)&1 != 0 {
		lo, hi = math.Nextafter32(a32, 0), a32
	}
	mid := (float64(lo) + float64(hi)) / 2 // exact in float64
	dec := new(big.Float).SetPrec(256).SetFloat64(mid)
	dec.Add(dec, big.NewFloat(2e-17)) // under half a float64 ulp at this magnitude
	text := dec.Text('e', 40)
	f64, _ := strconv.ParseFloat(text, 64)
	f32, _ := strconv.ParseFloat(text, 32)
	require.Equal(t, mid, f64, "the decimal rounds to the tie in float64")
	require.Equal(t, lo, float32(f64), "float64 then float32 gives the even neighbour")
	require.Equal(t, hi, float32(f32), "directly, the upper one")
	oldScale, err := json.Marshal(a32)
	require.NoError(t, err)
	wantDec := append([]vectorTensor{}, wantBits2...)
	wantDec[0].Scale = hi
	redo("ok-scale-decimal.tkart", "ok", "layer.w scale written as "+text+": read directly as float32 it is the upper neighbour of a float64 tie", bits2Path, func(d *draft) {
		d.json = func(b []byte) []byte {
			old := []byte(`"scale":` + string(oldScale) + `,`)
			require.True(t, bytes.Contains(b, old))
			return bytes.Replace(b, old, []byte(`"scale":`+text+`,`), 1)
		}
	})
	vs[len(vs)-1].Version, vs[len(vs)-1].Tensors = "1.0", wantDec

	// Bytes the format passes through, and edge cases of zero size.
	edge := &vectorSource{}
	edge.kept("flags", "BOOL", []int64{3}, []byte{0, 1, 2})
	edge.floatAs("no-columns", []int64{3, 0}, nil, convert.ActInt8)
	edge.float("no-rows", []int64{0, 5}, nil)
	okEdge, wantEdge := edge.build(t, Bits2)
	add(vector{File: "ok-edge.tkart", Expect: "ok", Version: "1.0", Note: "a BOOL tensor holding bytes 0, 1 and 2 (returned as they are); an int8 tensor of 3 rows of 0 columns (no groups: no scales); a ternary tensor of 0 rows (its scale is the recipe's for gamma 0)", Tensors: wantEdge}, okEdge)
	wantNegZero := append([]vectorTensor{}, wantInt8...)
	wantNegZero[0].Scales = []float32{wantInt8[0].Scales[0], float32(math.Copysign(0, -1)), wantInt8[0].Scales[2]}
	redo("ok-int8-scale-negative-zero.tkart", "ok", "embed: the all-zero row's scale is -0 (int8 scales are ≥ 0, and -0 counts as 0)", int8Path, func(d *draft) {
		setScale(d, 1, float32(math.Copysign(0, -1)))
	})
	vs[len(vs)-1].Version, vs[len(vs)-1].Tensors = "1.0", wantNegZero

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
−1, "0" and "+" for +1, in C order; int8 codes and kept tensors as hex
bytes; the float32 scales of a scales section in order), or the class
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
				desc := fmt.Sprintf("`%s` %s %v `%s`", tn.Name, tn.Codec, tn.Shape, val)
				switch {
				case tn.Granularity != "" && tn.Granularity != convert.GranTensor:
					desc = fmt.Sprintf("`%s` %s %s %s %v `%s` scales %v", tn.Name, tn.Kind, tn.Granularity, tn.Codec, tn.Shape, val, tn.Scales)
				case tn.DType != "" && tn.Kind == manifest.KindKept:
					desc = fmt.Sprintf("`%s` %s %s %v `%s`", tn.Name, tn.Codec, tn.DType, tn.Shape, val)
				}
				if tn.Exact {
					desc += " exact"
				}
				parts = append(parts, desc)
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

// chunkHashes are the piece records of formats 1.0 to 1.3: the BLAKE3 of
// each manifest.ChunkSize piece as an input of its own.
func chunkHashes(p []byte) []string {
	var out []string
	for o := 0; o < len(p); o += manifest.ChunkSize {
		out = append(out, manifest.HexHash(blake3.Sum256(p[o:min(o+manifest.ChunkSize, len(p))])))
	}
	return out
}
