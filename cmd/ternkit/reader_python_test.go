package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
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

// The second reader: testdata/tkart_read.py, written from pack/FORMAT.md
// alone with numpy (Debian python3-numpy), b3sum and zstd. These tests run
// it on the test vectors and on demo artifacts and require it to decode
// every tensor exactly as the Go reader does.

const (
	pythonReader = "../../testdata/tkart_read.py"
	vectorsDir   = "../../testdata/vectors"
)

// readResult is one file's outcome in the second reader's output format.
type readResult struct {
	File    string       `json:"file"`
	Result  string       `json:"result"`
	Detail  string       `json:"detail,omitempty"`
	Version string       `json:"version,omitempty"`
	Tensors []readTensor `json:"tensors,omitempty"`
	// Companions are the companion files (format 1.3).
	Companions []readCompanion `json:"companions,omitempty"`
}

type readCompanion struct {
	Name   string `json:"name"`
	Length int64  `json:"length"`
	SHA256 string `json:"sha256"`
}

type readTensor struct {
	Name          string    `json:"name"`
	Kind          string    `json:"kind"`
	Codec         string    `json:"codec"`
	Shape         []int64   `json:"shape"`
	DType         string    `json:"dtype,omitempty"`
	Granularity   string    `json:"granularity,omitempty"`
	Exact         bool      `json:"exact,omitempty"`
	Scale         float64   `json:"scale,omitempty"`
	Counts        []int64   `json:"counts,omitempty"`
	TritsSHA256   string    `json:"trits_sha256,omitempty"`
	CodesSHA256   string    `json:"codes_sha256,omitempty"`
	Float32SHA256 string    `json:"float32_sha256,omitempty"`
	KeptSHA256    string    `json:"kept_sha256,omitempty"`
	Trits         string    `json:"trits,omitempty"`
	Hex           string    `json:"hex,omitempty"`
	Scales        []float32 `json:"scales,omitempty"`
}

// requirePythonReader checks the second reader's tools are present.
func requirePythonReader(t *testing.T) string {
	t.Helper()
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s with numpy not found: CI must install python3-numpy (.ci/run)", py)
		}
		t.Skipf("%s with numpy not found; install it to run this check (apt-get install python3-numpy)", py)
	}
	outsidetool.Require(t, "b3sum", "b3sum")
	outsidetool.Require(t, "zstd", "zstd")
	return py
}

func pythonRead(t *testing.T, py string, withTrits bool, files ...string) []readResult {
	t.Helper()
	args := []string{pythonReader}
	if withTrits {
		args = append(args, "--trits")
	}
	cmd := exec.Command(py, append(args, files...)...)
	out, err := cmd.Output()
	var ee *exec.ExitError
	if errors.As(err, &ee) {
		t.Fatalf("%s: %v\n%s", pythonReader, err, ee.Stderr)
	}
	require.NoError(t, err)
	var res []readResult
	require.NoError(t, json.Unmarshal(out, &res))
	require.Len(t, res, len(files))
	return res
}

// goRead reads path with the Go reader into the second reader's format.
func goRead(t *testing.T, path string, withTrits bool) readResult {
	t.Helper()
	r := readResult{File: path}
	a, err := pack.Open(path)
	if err == nil {
		defer a.Close()
		err = a.Check()
	}
	if err != nil {
		r.Result = failureClass(err)
		return r
	}
	major, minor := a.Version()
	r.Result, r.Version, r.Tensors = "ok", fmt.Sprintf("%d.%d", major, minor), []readTensor{}
	for _, e := range a.Tensors() {
		tn, err := a.Tensor(e.Name)
		require.NoError(t, err)
		rt := readTensor{Name: e.Name, Kind: e.Kind, Codec: e.Codec, Shape: e.Shape}
		if rt.Shape == nil {
			rt.Shape = []int64{}
		}
		vals := make([]float32, tn.Len())
		if e.Kind == manifest.KindKept {
			p, err := tn.VerifiedPayload()
			require.NoError(t, err)
			rt.DType, rt.KeptSHA256 = e.DType, sha256Hex(p)
			if floatDTypes[e.DType] {
				require.NoError(t, tn.DecodeFloat32(vals))
				rt.Float32SHA256 = float32Digest(vals)
			}
			if withTrits {
				rt.Hex = hex.EncodeToString(p)
			}
			r.Tensors = append(r.Tensors, rt)
			continue
		}
		rt.Granularity, rt.Exact = e.Granularity.String(), e.Exact
		require.NoError(t, tn.DecodeFloat32(vals))
		rt.Float32SHA256 = float32Digest(vals)
		if e.Scales != nil && withTrits {
			rt.Scales, err = tn.Scales()
			require.NoError(t, err)
		}
		if e.Kind == manifest.KindInt8 {
			p, err := tn.VerifiedPayload()
			require.NoError(t, err)
			rt.CodesSHA256 = sha256Hex(p)
			if withTrits {
				rt.Hex = hex.EncodeToString(p)
			}
			r.Tensors = append(r.Tensors, rt)
			continue
		}
		trits := make([]int8, tn.Len())
		require.NoError(t, tn.DecodeTrits(trits))
		tb := make([]byte, len(trits))
		for i, v := range trits {
			tb[i] = byte(v)
		}
		rt.Scale = float64(e.Scale)
		rt.Counts = []int64{e.Trits.Neg, e.Trits.Zero, e.Trits.Pos}
		rt.TritsSHA256 = sha256Hex(tb)
		if withTrits {
			s := make([]byte, len(trits))
			for i, v := range trits {
				s[i] = "-0+"[v+1]
			}
			rt.Trits = string(s)
		}
		r.Tensors = append(r.Tensors, rt)
	}
	for _, c := range a.Companions() {
		b, err := a.Companion(c.Name)
		require.NoError(t, err)
		r.Companions = append(r.Companions, readCompanion{Name: c.Name, Length: int64(len(b)), SHA256: sha256Hex(b)})
	}
	return r
}

// floatDTypes are the dtypes whose kept bytes both readers decode to
// float32 (pack/FORMAT.md, "raw").
var floatDTypes = map[string]bool{"F64": true, "F32": true, "F16": true, "BF16": true, "F8_E4M3": true, "F8_E5M2": true}

// float32Digest is the SHA-256 of little-endian float32 values, every NaN
// written as 0x7FC00000 (NaN payloads are not compared).
func float32Digest(vals []float32) string {
	b := make([]byte, 4*len(vals))
	for i, v := range vals {
		bits := math.Float32bits(v)
		if v != v {
			bits = 0x7FC00000
		}
		binary.LittleEndian.PutUint32(b[4*i:], bits)
	}
	return sha256Hex(b)
}

func sha256Hex(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// failureClass names an Open or Check error by the classes of
// pack/FORMAT.md, "What a reader must reject".
func failureClass(err error) string {
	var fe *pack.FormatError
	switch {
	case errors.Is(err, pack.ErrNotArtifact):
		return "not-artifact"
	case errors.Is(err, pack.ErrVersion):
		return "version"
	case errors.Is(err, pack.ErrHash) && errors.As(err, &fe) && fe.Where == "manifest":
		return "manifest-hash"
	case errors.Is(err, pack.ErrHash):
		return "section-hash"
	case errors.Is(err, manifest.ErrInvalid):
		return "manifest"
	case errors.Is(err, pack.ErrInvalidCode):
		return "payload"
	case errors.Is(err, pack.ErrTritCounts):
		return "counts"
	case errors.Is(err, pack.ErrStructure):
		return "structure"
	}
	return "error: " + err.Error()
}

// compareReaders requires both readers to give the same outcome for every
// file, ignoring the wording of failures.
func compareReaders(t *testing.T, py string, withTrits bool, files []string) []readResult {
	t.Helper()
	theirs := pythonRead(t, py, withTrits, files...)
	for i, f := range files {
		ours := goRead(t, f, withTrits)
		got := theirs[i]
		got.Detail = ""
		require.Equal(t, ours, got, "%s (second reader said: %s)", f, theirs[i].Detail)
	}
	return theirs
}

// Every vector: the second reader reports what vectors.json expects, and
// the same as the Go reader, trit for trit.
func TestSecondReaderVectors(t *testing.T) {
	py := requirePythonReader(t)
	b, err := os.ReadFile(filepath.Join(vectorsDir, "vectors.json"))
	require.NoError(t, err)
	var vectors []struct {
		File    string `json:"file"`
		Expect  string `json:"expect"`
		Tensors []struct {
			Name   string    `json:"name"`
			Trits  string    `json:"trits"`
			Hex    string    `json:"hex"`
			Scales []float32 `json:"scales"`
		} `json:"tensors"`
		Companions []readCompanion `json:"companions"`
	}
	require.NoError(t, json.Unmarshal(b, &vectors))
	files := make([]string, len(vectors))
	for i, v := range vectors {
		files[i] = filepath.Join(vectorsDir, v.File)
	}
	res := compareReaders(t, py, true, files)
	for i, v := range vectors {
		require.Equal(t, v.Expect, res[i].Result, "%s: %s", v.File, res[i].Detail)
		require.Len(t, res[i].Tensors, len(v.Tensors), v.File)
		for k, want := range v.Tensors {
			got := res[i].Tensors[k]
			require.Equal(t, want.Name, got.Name, v.File)
			require.Equal(t, want.Trits, got.Trits, "%s %s", v.File, want.Name)
			require.Equal(t, want.Hex, got.Hex, "%s %s", v.File, want.Name)
			if len(want.Scales) > 0 || len(got.Scales) > 0 {
				require.Equal(t, want.Scales, got.Scales, "%s %s", v.File, want.Name)
			}
		}
		require.Equal(t, v.Companions, res[i].Companions, v.File)
	}
}

// Demo artifacts, in every codec: every tensor decodes to the same trits
// and float32 values in both readers.
func TestSecondReaderDemo(t *testing.T) {
	py := requirePythonReader(t)
	var files []string
	for _, codec := range []string{"auto", "bits2", "entropy"} {
		_, art := demoArtifact(t, t.TempDir(), "--codec", codec)
		files = append(files, art)
	}
	res := compareReaders(t, py, false, files)
	for i, r := range res {
		require.Equal(t, "ok", r.Result, files[i])
		require.Len(t, r.Tensors, 4+9*demoLayers, files[i]) // embed, final norm, head, step; 9 per layer
		// The demo's policy takes every action, so both readers meet every
		// kind of tensor and scales section.
		seen := map[string]bool{}
		for _, tn := range r.Tensors {
			seen[tn.Kind+" "+tn.Granularity+tn.DType] = true
			seen["exact"] = seen["exact"] || tn.Exact
		}
		for _, want := range []string{"int8 row", "kept F16", "kept BF16", "kept F32", "kept I64", "ternary row", "ternary group:128", "ternary tensor", "exact"} {
			require.True(t, seen[want], "%s: no %s tensor in %v", files[i], want, seen)
		}
	}
}

// A section over 4 MiB carries its pieces' chaining values (format 1.4):
// both readers accept the artifact, and both report a section-hash
// failure naming the piece when one record in the manifest is replaced
// (manifest and trailer hash kept consistent).
func TestSecondReaderPieceCVs(t *testing.T) {
	py := requirePythonReader(t)
	dir := t.TempDir()
	data := make([]byte, manifest.ChunkSize+5000) // two chunks, the last one short
	for i := range data {
		data[i] = byte(i * 7)
	}
	src := filepath.Join(dir, "big.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{{Name: "table", DType: "U8", Shape: []int64{int64(len(data))}, Data: data}}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	good := filepath.Join(dir, "good"+pack.Extension)
	m, err := pack.Build(s, good, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	require.Len(t, m.Tensors[0].Section.PieceCVs, 2)

	b, err := os.ReadFile(good)
	require.NoError(t, err)
	tr := len(b) - pack.TrailerLen
	off := int(binary.LittleEndian.Uint64(b[tr:]))
	body := b[off:tr]
	last := m.Tensors[0].Section.PieceCVs[1]
	i := bytes.Index(body, []byte(last))
	require.Positive(t, i)
	copy(body[i:], m.Tensors[0].Section.PieceCVs[0]) // the first piece's value in the second's place
	sum := blake3.Sum256(body)
	copy(b[tr+16:], sum[:])
	bad := filepath.Join(dir, "bad-chunk"+pack.Extension)
	require.NoError(t, os.WriteFile(bad, b, 0o644))

	res := compareReaders(t, py, false, []string{good, bad})
	require.Equal(t, "ok", res[0].Result, res[0].Detail)
	require.Equal(t, "section-hash", res[1].Result, res[1].Detail)
	require.Contains(t, res[1].Detail, "piece 1")
}

// The second reader's own BLAKE3 (the compression function written with
// numpy): its root hashes equal b3sum's (Debian's b3sum) across block,
// chunk, tree and piece boundaries, and its piece chaining values equal
// the Go writer's, joining into the same hash.
func TestSecondReaderBLAKE3(t *testing.T) {
	py := requirePythonReader(t)
	dir := t.TempDir()
	lengths := []int{0, 1, 63, 64, 65, 1023, 1024, 1025, 2048, 3 * 1024, 5*1024 + 7, 65536 + 5,
		manifest.ChunkSize, manifest.ChunkSize + 1, 2*manifest.ChunkSize + 5000}
	var files []string
	for i, n := range lengths {
		data := make([]byte, n)
		for j := range data {
			data[j] = byte(j*31 + j>>11 + i)
		}
		f := filepath.Join(dir, fmt.Sprint(n))
		require.NoError(t, os.WriteFile(f, data, 0o644))
		files = append(files, f)
	}
	out, err := exec.Command(py, append([]string{pythonReader, "--blake3"}, files...)...).Output()
	require.NoError(t, err)
	var got []struct {
		File     string   `json:"file"`
		BLAKE3   string   `json:"blake3"`
		PieceCVs []string `json:"piece_cvs"`
		Joined   string   `json:"joined"`
	}
	require.NoError(t, json.Unmarshal(out, &got))
	require.Len(t, got, len(files))
	for i, f := range files {
		b3, err := exec.Command("b3sum", "--no-names", f).Output()
		require.NoError(t, err)
		require.Equal(t, strings.TrimSpace(string(b3)), got[i].BLAKE3, "%d bytes", lengths[i])
		data, err := os.ReadFile(f)
		require.NoError(t, err)
		if len(data) <= manifest.ChunkSize {
			require.Empty(t, got[i].PieceCVs)
			continue
		}
		var want []string
		for _, cv := range pack.PieceCVs(data, 1) {
			want = append(want, manifest.HexHash(cv))
		}
		require.Equal(t, want, got[i].PieceCVs, "%d bytes", lengths[i])
		require.Equal(t, got[i].BLAKE3, got[i].Joined, "%d bytes", lengths[i])
	}
}
