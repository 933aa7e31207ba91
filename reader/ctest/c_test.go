// The race detector has nothing to watch here: the tests drive the C
// program in subprocesses, one at a time. Skipping them under -race keeps
// CI from building and running the C reader twice.

//go:build !race

package ctest

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
	"ternkit/internal/testweights"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/tritmat"
)

const (
	cDir         = "../c"
	vectorsDir   = "../../testdata/vectors"
	malformedDir = "../../testdata/malformed"
)

// The C reader is C99 and must compile without a warning under gcc and
// clang (Debian packages gcc and clang).
var strictFlags = []string{"-std=c99", "-Wall", "-Wextra", "-Werror"}

// sanitize builds with AddressSanitizer and UndefinedBehaviorSanitizer,
// stopping at the first report.
var sanitize = []string{"-O1", "-g", "-fno-omit-frame-pointer", "-fsanitize=address,undefined", "-fno-sanitize-recover=all"}

var withZstd = []string{"-DTKART_WITH_ZSTD"}

var (
	buildMu  sync.Mutex
	buildDir string
	built    = map[string]string{}
)

func TestMain(m *testing.M) {
	var err error
	buildDir, err = os.MkdirTemp("", "tkart-c-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(2)
	}
	code := m.Run()
	os.RemoveAll(buildDir)
	os.Exit(code)
}

// build compiles tkart-check with compiler cc and flags (once per test
// binary) and returns its path. With -DTKART_WITH_ZSTD it links libzstd
// (Debian libzstd-dev), whose absence skips the test outside CI.
func build(t testing.TB, cc string, flags ...string) string {
	t.Helper()
	path := outsidetool.Require(t, cc, cc)
	args := append(append(append([]string{}, strictFlags...), flags...), filepath.Join(cDir, "tkart.c"), filepath.Join(cDir, "tkart_check.c"))
	zstd := strings.Contains(strings.Join(flags, " "), "TKART_WITH_ZSTD")
	if zstd {
		args = append(args, "-lzstd")
	}
	// The sources' bytes are part of the key (and read here, so that the
	// go test cache sees them change).
	key := cc + " " + strings.Join(args, " ")
	for _, f := range []string{"tkart.h", "tkart.c", "tkart_check.c"} {
		b, err := os.ReadFile(filepath.Join(cDir, f))
		require.NoError(t, err)
		sum := sha256.Sum256(b)
		key += " " + hex.EncodeToString(sum[:8])
	}
	buildMu.Lock()
	defer buildMu.Unlock()
	if bin, ok := built[key]; ok {
		return bin
	}
	bin := filepath.Join(buildDir, fmt.Sprintf("tkart-check-%d", len(built)))
	out, err := exec.Command(path, append(args, "-o", bin)...).CombinedOutput()
	if err != nil && zstd && bytes.Contains(out, []byte("zstd")) { // zstd.h or -lzstd missing
		if os.Getenv("CI") != "" {
			t.Fatalf("libzstd not found: CI must install libzstd-dev (.ci/run)\n%s", out)
		}
		t.Skipf("libzstd not found; install libzstd-dev to run this check\n%s", out)
	}
	require.NoError(t, err, "%s %s\n%s", cc, strings.Join(args, " "), out)
	require.Empty(t, string(out), "compiler output")
	built[key] = bin
	return bin
}

// sanitized is the reader most tests run: gcc, zstd, sanitizers on.
func sanitized(t testing.TB) string {
	t.Helper()
	return build(t, "gcc", append(append([]string{}, withZstd...), sanitize...)...)
}

// run runs the C program and requires it to exit 0 with nothing on stderr
// (a sanitizer report goes there).
func run(t testing.TB, bin string, args ...string) []byte {
	t.Helper()
	cmd := exec.Command(bin, args...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	err := cmd.Run()
	require.NoError(t, err, "%s %s\n%s", bin, strings.Join(args, " "), stderr.String())
	require.Empty(t, stderr.String(), "%s %s", bin, strings.Join(args, " "))
	return stdout.Bytes()
}

// result is one file's outcome as tkart-check --json --trits prints it.
type result struct {
	File    string   `json:"file"`
	Result  string   `json:"result"`
	Detail  string   `json:"detail,omitempty"`
	Version string   `json:"version,omitempty"`
	Tensors []tensor `json:"tensors,omitempty"`
	// Companions (format 1.3) with the BLAKE3 of the bytes the reader
	// returns for each.
	Companions []companion `json:"companions,omitempty"`
}

type companion struct {
	Name   string `json:"name"`
	Offset int64  `json:"offset"`
	Length int64  `json:"length"`
	BLAKE3 string `json:"blake3"`
}

type tensor struct {
	Name         string    `json:"name"`
	Kind         string    `json:"kind"`
	Codec        string    `json:"codec"`
	Shape        []int64   `json:"shape"`
	SourceDType  string    `json:"source_dtype"`
	Offset       int64     `json:"offset"`
	Length       int64     `json:"length"`
	DType        string    `json:"dtype,omitempty"`
	Granularity  string    `json:"granularity,omitempty"`
	Exact        bool      `json:"exact,omitempty"`
	Scale        float32   `json:"scale,omitempty"`
	Counts       []int64   `json:"counts,omitempty"`
	Trits        string    `json:"trits,omitempty"`
	Hex          string    `json:"hex,omitempty"`
	Scales       []float32 `json:"scales,omitempty"`
	ScalesOffset int64     `json:"scales_offset,omitempty"`
	ScalesLength int64     `json:"scales_length,omitempty"`
	// ValuesBLAKE3 is the BLAKE3 of the values as little-endian float32,
	// every NaN written as 0x7FC00000 (FORMAT.md, "What a reader returns").
	ValuesBLAKE3 string `json:"values_blake3,omitempty"`
	Error        string `json:"error,omitempty"`
}

func cRead(t testing.TB, bin string, files ...string) []result {
	t.Helper()
	out := run(t, bin, append([]string{"--json", "--trits"}, files...)...)
	var res []result
	require.NoError(t, json.Unmarshal(out, &res), "%s", out)
	require.Len(t, res, len(files))
	return res
}

// goRead reads path with the pack package's reader into the C program's
// output form.
func goRead(t testing.TB, path string) result {
	t.Helper()
	r := result{File: path}
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
	r.Result, r.Version, r.Tensors = "ok", fmt.Sprintf("%d.%d", major, minor), []tensor{}
	for _, e := range a.Tensors() {
		tn, err := a.Tensor(e.Name)
		require.NoError(t, err)
		rt := tensor{Name: e.Name, Kind: e.Kind, Codec: e.Codec, Shape: e.Shape, SourceDType: e.SourceDType,
			Offset: e.Section.Offset, Length: e.Section.Length}
		if rt.Shape == nil {
			rt.Shape = []int64{}
		}
		if e.Kind != manifest.KindKept || floatDTypes[e.DType] {
			vals := make([]float32, tn.Len())
			require.NoError(t, tn.DecodeFloat32(vals))
			rt.ValuesBLAKE3 = float32Digest(vals)
		}
		if e.Kind == manifest.KindKept {
			p, err := tn.VerifiedPayload()
			require.NoError(t, err)
			rt.DType, rt.Hex = e.DType, hex.EncodeToString(p)
			r.Tensors = append(r.Tensors, rt)
			continue
		}
		rt.Granularity, rt.Exact = e.Granularity.String(), e.Exact
		if e.Scales != nil {
			rt.Scales, err = tn.Scales()
			require.NoError(t, err)
			rt.ScalesOffset, rt.ScalesLength = e.Scales.Offset, e.Scales.Length
		} else {
			rt.Scale = e.Scale
		}
		if e.Kind == manifest.KindInt8 {
			p, err := tn.VerifiedPayload()
			require.NoError(t, err)
			rt.Hex = hex.EncodeToString(p)
		} else {
			trits := make([]int8, tn.Len())
			require.NoError(t, tn.DecodeTrits(trits))
			rt.Trits = tritString(trits)
			rt.Counts = []int64{e.Trits.Neg, e.Trits.Zero, e.Trits.Pos}
		}
		r.Tensors = append(r.Tensors, rt)
	}
	for _, c := range a.Companions() {
		b, err := a.Companion(c.Name)
		require.NoError(t, err)
		sum := blake3.Sum256(b)
		r.Companions = append(r.Companions, companion{Name: c.Name, Offset: c.Section.Offset, Length: c.Section.Length, BLAKE3: hex.EncodeToString(sum[:])})
	}
	return r
}

// floatDTypes are the kept dtypes whose bytes both readers decode to
// float32 (pack/FORMAT.md, "raw").
var floatDTypes = map[string]bool{"F64": true, "F32": true, "F16": true, "BF16": true, "F8_E4M3": true, "F8_E5M2": true}

// float32Digest is the BLAKE3 of little-endian float32 values, every NaN
// written as 0x7FC00000 (NaN payloads are not part of the result).
func float32Digest(vals []float32) string {
	b := make([]byte, 4*len(vals))
	for i, v := range vals {
		bits := math.Float32bits(v)
		if v != v {
			bits = 0x7FC00000
		}
		binary.LittleEndian.PutUint32(b[4*i:], bits)
	}
	sum := blake3.Sum256(b)
	return hex.EncodeToString(sum[:])
}

func tritString(trits []int8) string {
	s := make([]byte, len(trits))
	for i, v := range trits {
		s[i] = "-0+"[v+1]
	}
	return string(s)
}

// failureClass names a pack reader error by the classes of
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

// compare requires the C reader and the Go reader to give the same outcome
// for every file: class, version, and every tensor's fields, trits, codes,
// kept bytes and scales.
func compare(t *testing.T, bin string, files []string) []result {
	t.Helper()
	theirs := cRead(t, bin, files...)
	for i, f := range files {
		got := theirs[i]
		got.Detail = ""
		require.Equal(t, goRead(t, f), got, "%s (C reader said: %s)", f, theirs[i].Detail)
	}
	return theirs
}

type vector struct {
	File    string `json:"file"`
	Expect  string `json:"expect"`
	Version string `json:"version"`
	Tensors []struct {
		Name   string    `json:"name"`
		Trits  string    `json:"trits"`
		Hex    string    `json:"hex"`
		Scales []float32 `json:"scales"`
	} `json:"tensors"`
	Companions []struct {
		Name   string `json:"name"`
		Length int64  `json:"length"`
		SHA256 string `json:"sha256"`
	} `json:"companions"`
}

func vectors(t *testing.T) ([]vector, []string) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(vectorsDir, "vectors.json"))
	require.NoError(t, err)
	var vs []vector
	require.NoError(t, json.Unmarshal(b, &vs))
	require.NotEmpty(t, vs)
	files := make([]string, len(vs))
	for i, v := range vs {
		files[i] = filepath.Join(vectorsDir, v.File)
	}
	return vs, files
}

// badByte is the file offset a failure message must name, for vectors
// whose README says which byte is wrong.
var badByte = map[string]string{
	"bad-base3-243.tkart":         "byte 64:", // base3 byte 0
	"bad-base3-padding.tkart":     "byte 66:", // the last of 3 payload bytes
	"bad-bits2-code3.tkart":       "byte 64:", // bits2 byte 0
	"bad-bits2-padding.tkart":     "byte 67:", // the last of 4 payload bytes
	"bad-preamble-reserved.tkart": "byte 40:",
	"bad-flags.tkart":             "byte 12:",
	"bad-int8-code.tkart":         "byte 64:",
}

// Every test vector: the C reader reports what vectors.json expects, and
// the same as the Go reader, trit for trit, under the sanitizers.
func TestVectors(t *testing.T) {
	bin := sanitized(t)
	vs, files := vectors(t)
	res := compare(t, bin, files)
	for i, v := range vs {
		require.Equal(t, v.Expect, res[i].Result, "%s: %s", v.File, res[i].Detail)
		if v.Expect != "ok" {
			require.Contains(t, res[i].Detail, "FORMAT.md", "%s: the message names the rule", v.File)
			if at, ok := badByte[v.File]; ok {
				require.Contains(t, res[i].Detail, at, "%s: the message names the byte", v.File)
			}
			continue
		}
		require.Equal(t, v.Version, res[i].Version, v.File)
		require.Len(t, res[i].Tensors, len(v.Tensors), v.File)
		for k, want := range v.Tensors {
			got := res[i].Tensors[k]
			require.Equal(t, want.Name, got.Name, v.File)
			require.Equal(t, want.Trits, got.Trits, "%s %s", v.File, want.Name)
			require.Equal(t, want.Hex, got.Hex, "%s %s", v.File, want.Name)
			if len(got.Scales) == 0 {
				got.Scales = nil // a scales section of 0 bytes: vectors.json lists none
			}
			require.Equal(t, want.Scales, got.Scales, "%s %s", v.File, want.Name)
		}
		// Companions: the C reader's bytes hash as the Go reader's (compare
		// above), whose SHA-256 is the one vectors.json gives.
		require.Len(t, res[i].Companions, len(v.Companions), v.File)
		a, err := pack.Open(files[i])
		require.NoError(t, err)
		for k, want := range v.Companions {
			got := res[i].Companions[k]
			require.Equal(t, want.Name, got.Name, v.File)
			require.Equal(t, want.Length, got.Length, v.File)
			b, err := a.Companion(want.Name)
			require.NoError(t, err)
			sum := sha256.Sum256(b)
			require.Equal(t, want.SHA256, hex.EncodeToString(sum[:]), "%s %s", v.File, want.Name)
		}
		require.NoError(t, a.Close())
	}
}

// Built without libzstd, the reader reports entropy payloads as
// unsupported and reads everything else as before; the frame rules it
// checks before decoding still reject the broken frames.
func TestWithoutZstd(t *testing.T) {
	bin := build(t, "gcc", sanitize...)
	vs, files := vectors(t)
	res := cRead(t, bin, files...)
	for i, v := range vs {
		want := v.Expect
		switch v.File {
		case "ok-entropy.tkart", "ok-auto.tkart", "bad-entropy-content.tkart":
			want = "unsupported"
		}
		require.Equal(t, want, res[i].Result, "%s: %s", v.File, res[i].Detail)
	}
}

// ternkitCLI builds the ternkit command into dir.
func ternkitCLI(t *testing.T, dir string) string {
	t.Helper()
	goTool := filepath.Join(runtime.GOROOT(), "bin", "go")
	bin := filepath.Join(dir, "ternkit")
	out, err := exec.Command(goTool, "build", "-o", bin, "ternkit/cmd/ternkit").CombinedOutput()
	require.NoError(t, err, "%s", out)
	return bin
}

// The demo artifact in every codec and the malformed artifacts of
// testdata/malformed: the C reader agrees with the Go reader on each.
func TestDemoAndMalformed(t *testing.T) {
	bin := sanitized(t)
	dir := t.TempDir()
	cli := ternkitCLI(t, dir)
	var files []string
	for _, codec := range []string{"auto", "bits2", "base3", "entropy"} {
		d := filepath.Join(dir, codec)
		out, err := exec.Command(cli, "demo", "--dir", d, "--codec", codec).CombinedOutput()
		require.NoError(t, err, "%s", out)
		arts, err := filepath.Glob(filepath.Join(d, "*.tkart"))
		require.NoError(t, err)
		require.Len(t, arts, 1)
		files = append(files, arts[0])
	}
	res := compare(t, bin, files)
	for i, r := range res {
		require.Equal(t, "ok", r.Result, "%s: %s", files[i], r.Detail)
		kinds := map[string]bool{}
		for _, tn := range r.Tensors {
			kinds[tn.Kind+" "+tn.Codec] = true
		}
		require.True(t, kinds["int8 raw"] && kinds["kept raw"], "%s: %v", files[i], kinds)
	}

	// The example of reader/c/README.md compiles and runs one layer of
	// each demo artifact, and its y[0] is the reference product's.
	readme, err := os.ReadFile(filepath.Join(cDir, "README.md"))
	require.NoError(t, err)
	_, code, ok := strings.Cut(string(readme), "## Example")
	require.True(t, ok)
	_, code, _ = strings.Cut(code, "```c\n")
	code, _, _ = strings.Cut(code, "```")
	example := filepath.Join(dir, "example")
	require.NoError(t, os.WriteFile(example+".c", []byte(code), 0o644))
	gcc := outsidetool.Require(t, "gcc", "gcc")
	out, err := exec.Command(gcc, append(append([]string{}, strictFlags...), "-D_POSIX_C_SOURCE=200809L", "-DTKART_WITH_ZSTD", "-I", cDir,
		"-o", example, example+".c", filepath.Join(cDir, "tkart.c"), "-lzstd")...).CombinedOutput()
	require.NoError(t, err, "%s", out)
	for _, art := range files {
		out, err := exec.Command(example, art).CombinedOutput()
		require.NoError(t, err, "%s", out)
		a, err := pack.Open(art)
		require.NoError(t, err)
		tn, err := a.Tensor("model.layers.0.mlp.down_proj.weight")
		require.NoError(t, err)
		trits := make([]int8, tn.Len())
		require.NoError(t, tn.DecodeTrits(trits))
		cols := int(tn.Entry.Shape[1])
		x := make([]int8, cols)
		for c := range x {
			x[c] = int8(c%7 - 3)
		}
		y := matvecRef(trits, cols, 0, 1, x)
		require.True(t, strings.HasPrefix(string(out), fmt.Sprintf("y[0] = %d, dequantized ", y[0])), "%s: %s", art, out)
		require.NoError(t, a.Close())
	}

	bad, err := filepath.Glob(filepath.Join(malformedDir, "*.tkart"))
	require.NoError(t, err)
	require.NotEmpty(t, bad)
	for i, r := range compare(t, bin, bad) {
		require.NotEqual(t, "ok", r.Result, bad[i])
	}
}

// Truncations and single-byte flips of every vector (manifest flips with
// the trailer hash recomputed, so that the JSON parser sees them), and
// every arena size up to the one tkart_arena_size gives: no sanitizer
// report, and every outcome is a class of FORMAT.md.
func TestMutationsUnderSanitizers(t *testing.T) {
	bin := sanitized(t)
	_, files := vectors(t)
	// Files over 64 KiB take a few mutations only: each run hashes them whole.
	var small, big []string
	for _, f := range files {
		st, err := os.Stat(f)
		require.NoError(t, err)
		if st.Size() > 64<<10 {
			big = append(big, f)
		} else {
			small = append(small, f)
		}
	}
	out := string(run(t, bin, append([]string{"--mutate", "1000"}, small...)...))
	if len(big) > 0 {
		out += string(run(t, bin, append([]string{"--mutate", "8"}, big...)...))
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	require.Len(t, lines, len(files))
	classes := map[string]bool{}
	for _, l := range lines {
		fields := strings.Fields(l[strings.Index(l, ";")+1:])
		for k := 0; k+1 < len(fields); k += 2 {
			classes[fields[k]] = true
			_, err := strconv.Atoi(fields[k+1])
			require.NoError(t, err, l)
		}
	}
	for _, c := range []string{"ok", "not-artifact", "version", "structure", "manifest-hash", "manifest", "section-hash", "payload"} {
		require.True(t, classes[c], "no mutation gave %s: %v", c, classes)
	}
	for c := range classes {
		require.NotContains(t, []string{"arena", "argument", "unknown"}, c)
	}
}

// BLAKE3 of inputs across the chunk and tree boundaries equals b3sum's
// (Debian b3sum, the BLAKE3 team's CLI); three values of the BLAKE3 test
// vectors are checked as published.
func TestBLAKE3(t *testing.T) {
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	bin := sanitized(t)
	dir := t.TempDir()
	// The published test vectors (test_vectors.json in the BLAKE3
	// repository) hash the bytes i mod 251; these hashes of lengths 0, 1
	// and 1024 are written from memory and confirmed by b3sum below.
	published := map[int]string{
		0:    "af1349b9f5f9a1a6a0404dea36dcc9499bcb25c9adc112b7cc9a93cae41f3262",
		1:    "2d3adedff11b61f14c886e35afa036736dcd87a74d27b5c1510225d0f592e213",
		1024: "42214739f095a406f3fc83deb889744ac00df831c10daa55189b5d121c855af7",
	}
	for _, n := range []int{0, 1, 63, 64, 65, 127, 128, 1023, 1024, 1025, 2048, 2049, 3072, 3073, 4096, 4097,
		5120, 5121, 6144, 6145, 7168, 7169, 8192, 8193, 16384, 31744, 102400, 1<<20 + 3, 1 << 22, 1<<22 + 1} {
		data := make([]byte, n)
		for i := range data {
			data[i] = byte(i % 251)
		}
		f := filepath.Join(dir, strconv.Itoa(n))
		require.NoError(t, os.WriteFile(f, data, 0o644))
		got := strings.TrimSpace(string(run(t, bin, "--blake3", f)))
		out, err := exec.Command(b3sum, "--no-names", f).Output()
		require.NoError(t, err)
		require.Equal(t, strings.TrimSpace(string(out)), got, "length %d", n)
		if want, ok := published[n]; ok {
			require.Equal(t, want, got, "published vector, length %d", n)
		}
	}
}

// manifestEdit rewrites the manifest of an artifact and its trailer
// (offset, length, BLAKE3), keeping everything before it.
func manifestEdit(t testing.TB, art []byte, edit func(string) string) []byte {
	t.Helper()
	tr := art[len(art)-pack.TrailerLen:]
	m := binary.LittleEndian.Uint64(tr)
	body := edit(string(art[m : len(art)-pack.TrailerLen]))
	out := append(append([]byte{}, art[:m]...), body...)
	trailer := make([]byte, pack.TrailerLen)
	binary.LittleEndian.PutUint64(trailer, m)
	binary.LittleEndian.PutUint64(trailer[8:], uint64(len(body)))
	sum := blake3.Sum256([]byte(body))
	copy(trailer[16:], sum[:])
	copy(trailer[56:], tr[56:])
	return append(out, trailer...)
}

// The manifest's JSON rules (FORMAT.md, "Manifest"): RFC 8259 JSON in
// valid UTF-8 (RFC 3629), exact keys, each once, integers without fraction
// or exponent in the signed 64-bit range, null as the zero value. Where the
// Go reader is the reference, it must agree.
func TestManifestJSON(t *testing.T) {
	bin := sanitized(t)
	base, err := os.ReadFile(filepath.Join(vectorsDir, "ok-bits2.tkart"))
	require.NoError(t, err)
	sub := func(old, new string) func(string) string {
		return func(s string) string {
			require.Contains(t, s, old)
			return strings.Replace(s, old, new, 1)
		}
	}
	const tool = `"tool":"ternkit vectors"`
	nested := func(n int) string { return `"tool":` + strings.Repeat("[", n) + strings.Repeat("]", n) }
	long := `"epsilon":0.00001` + strings.Repeat("0", 300)
	cases := []struct {
		name, want string
		edit       func(string) string
		goAgrees   bool
	}{
		{"unchanged", "ok", func(s string) string { return s }, true},
		{"escaped key", "ok", sub(`"format":`, `"\u0066ormat":`), true},
		{"surrogate pair", "ok", sub(tool, `"tool":"ternkit \ud83c\udf31"`), true},
		{"whitespace", "ok", sub(`,"tool"`, " ,\n\t\"tool\" "), true},
		{"trailing whitespace", "ok", func(s string) string { return s + "\r\n " }, true},
		{"null", "manifest", sub(tool, `"tool":null`), true},
		{"null array element", "manifest", sub(`"shape":[2,7]`, `"shape":[2,null]`), true},
		{"optional key left out", "ok", sub(`,"exact":true`, ``), true},
		{"required key left out", "manifest", sub(tool+`,`, ``), true},
		{"exponent number", "ok", sub(`"epsilon":0.00001`, `"epsilon":1E-5`), true},
		{"created", "ok", sub(tool, tool+`,"created":"2024-02-29T23:59:59Z"`), true},
		// A lone surrogate escape names no character: rejected (RFC 8259
		// section 8.2 leaves it to the reader; FORMAT.md rejects it).
		{"lone high surrogate", "manifest", sub(tool, `"tool":"\ud800"`), true},
		{"lone low surrogate", "manifest", sub(tool, `"tool":"\udc00x"`), true},
		{"high surrogate then letter", "manifest", sub(tool, `"tool":"\ud800\u0041"`), true},
		{"invalid UTF-8", "manifest", sub(tool, "\"tool\":\"a\xffb\""), true},
		{"overlong UTF-8", "manifest", sub(tool, "\"tool\":\"a\xc0\xafb\""), true},
		{"UTF-8 surrogate", "manifest", sub(tool, "\"tool\":\"a\xed\xa0\x80b\""), true},
		{"control character", "manifest", sub(tool, "\"tool\":\"a\x01b\""), true},
		{"bad escape", "manifest", sub(tool, `"tool":"a\qb"`), true},
		{"version 1.0", "manifest", sub(`"version":1`, `"version":1.0`), true},
		{"version 1e0", "manifest", sub(`"version":1`, `"version":1e0`), true},
		{"version leading zero", "manifest", sub(`"version":1`, `"version":01`), true},
		{"version +1", "manifest", sub(`"version":1`, `"version":+1`), true},
		{"fractional dimension", "manifest", sub(`"shape":[2,7]`, `"shape":[2,7.0]`), true},
		{"integer overflow", "manifest", sub(`"bytes":382`, `"bytes":9223372036854775808`), true},
		{"duplicate recipe key", "manifest", sub(`"tie":"half-even"`, `"tie":"half-even","tie":"half-even"`), true},
		{"duplicate metadata key", "manifest", sub(`"scenario":"ternkit format test vector"`, `"scenario":"a","scenario":"b"`), true},
		{"key case", "manifest", sub(`"format":`, `"Format":`), true},
		{"unknown key", "manifest", sub(`{"format"`, `{"note":"x","format"`), true},
		{"data after the object", "manifest", func(s string) string { return s + " {}" }, true},
		{"byte order mark", "manifest", func(s string) string { return "\ufeff" + s }, true},
		{"trailing comma", "manifest", sub(`"shape":[2,7]`, `"shape":[2,7,]`), true},
		{"boolean as number", "manifest", sub(`"exact":true`, `"exact":1`), true},
		{"epsilon above 0.01", "manifest", sub(`"epsilon":0.00001`, `"epsilon":0.0100001`), true},
		{"epsilon 0.01", "ok", sub(`"epsilon":0.00001`, `"epsilon":0.01`), true},
		{"NaN", "manifest", sub(`"epsilon":0.00001`, `"epsilon":NaN`), true},
		{"float64 overflow", "manifest", sub(`"rel_rmse":0.49656424067266913`, `"rel_rmse":1e999`), true},
		{"float32 overflow", "manifest", sub(`"scale":0.68214285`, `"scale":1e39`), true},
		{"deep nesting", "manifest", sub(tool, nested(10001)), true},
		{"deeper nesting", "manifest", sub(tool, nested(1000000)), true},
		{"empty policy", "manifest", sub(tool, tool+`,"policy":[]`), true},
		{"invalid date", "manifest", sub(tool, tool+`,"created":"2023-02-29T00:00:00Z"`), true},
		{"not an object", "manifest", func(string) string { return "[]" }, true},
		// The Go reader reports an empty manifest without a class.
		{"empty", "manifest", func(string) string { return "" }, false},
		// Many small values: the arena tkart_arena_size gives holds them.
		{"many dimensions", "ok", sub(`"shape":[0,4]`, `"shape":[0,4`+strings.Repeat(",0", 20000)+`]`), true},
		{"many metadata keys", "ok", sub(`"scenario":"ternkit format test vector"`, manyKeys(3000)), true},
		{"many chunks", "manifest", sub(`"length":6,`, `"length":6,"chunks":[`+strings.Repeat(`"`+strings.Repeat("0", 64)+`",`, 999)+`"`+strings.Repeat("0", 64)+`"],`), true},
		// This reader's own limit (FORMAT.md lets a reader document its own).
		{"number over the reader's limit", "manifest", sub(`"epsilon":0.00001`, long), false},
	}
	dir := t.TempDir()
	files := make([]string, len(cases))
	for i, c := range cases {
		files[i] = filepath.Join(dir, fmt.Sprintf("case%02d.tkart", i))
		require.NoError(t, os.WriteFile(files[i], manifestEdit(t, base, c.edit), 0o644))
	}
	res := cRead(t, bin, files...)
	for i, c := range cases {
		require.Equal(t, c.want, res[i].Result, "%s: %s", c.name, res[i].Detail)
		if c.goAgrees {
			require.Equal(t, c.want, goRead(t, files[i]).Result, "%s: the Go reader", c.name)
		}
	}
}

// manyKeys is n distinct metadata entries with short keys.
func manyKeys(n int) string {
	parts := make([]string, n)
	for i := range parts {
		parts[i] = fmt.Sprintf(`"%x":""`, i)
	}
	return strings.Join(parts, ",")
}

// matvecRef is the definition of the integer ternary product, summed
// element by element from the pack reader's decoded trits: y[r] =
// Σ_c trit[r][c]·x[c] over the given rows, in int32. TestMatvec holds both
// the C reader and the Go kernel (tritmat) to it.
func matvecRef(trits []int8, cols, row0, nrows int, x []int8) []int32 {
	y := make([]int32, nrows)
	for r := range nrows {
		var acc int32
		for c, v := range trits[(row0+r)*cols : (row0+r+1)*cols] {
			acc += int32(v) * int32(x[c])
		}
		y[r] = acc
	}
	return y
}

// The matrix-vector product and row-range decoding on random shapes, rows
// not aligned to the bytes of either codec, against the Go reader.
func TestMatvec(t *testing.T) {
	bin := sanitized(t)
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(7, 19))
	shapes := [][2]int{{1, 1}, {3, 7}, {5, 13}, {2, 2049}, {4, 1500}, {9, 37}, {0, 5}, {6, 1024}}
	for range 6 {
		shapes = append(shapes, [2]int{1 + rng.IntN(12), 1 + rng.IntN(300)})
	}
	var ws []convert.WriteTensor
	for i, s := range shapes {
		w := testweights.Gaussian(rng, s[0]*s[1])
		data := make([]byte, 4*len(w))
		for k, v := range w {
			binary.LittleEndian.PutUint32(data[4*k:], math.Float32bits(v))
		}
		ws = append(ws, convert.WriteTensor{Name: fmt.Sprintf("m%d.w", i), DType: "F32", Shape: []int64{int64(s[0]), int64(s[1])}, Data: data})
	}
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, ws, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	for _, codec := range pack.Codecs {
		art := filepath.Join(dir, string(codec)+pack.Extension)
		_, err := pack.Build(s, art, pack.Options{Codec: codec, Recipe: convert.DefaultRecipe()})
		require.NoError(t, err)
		a, err := pack.Open(art)
		require.NoError(t, err)
		for i, sh := range shapes {
			name := fmt.Sprintf("m%d.w", i)
			tn, err := a.Tensor(name)
			require.NoError(t, err)
			require.Equal(t, manifest.KindTernary, tn.Entry.Kind, name)
			require.Equal(t, string(codec), tn.Entry.Codec, name)
			trits := make([]int8, tn.Len())
			require.NoError(t, tn.DecodeTrits(trits))
			rows, cols := sh[0], sh[1]
			kcodec, payload := codec, []byte(nil)
			if codec == pack.Entropy {
				kcodec, payload = pack.Base3, pack.Base3.Encode(nil, trits)
			} else {
				payload, err = tn.VerifiedPayload()
				require.NoError(t, err)
			}
			x := make([]int8, cols)
			for k := range x {
				x[k] = int8(rng.IntN(256) - 128) // the whole int8 range, -128 included
			}
			xf := filepath.Join(dir, fmt.Sprintf("x%d", i))
			require.NoError(t, os.WriteFile(xf, int8Bytes(x), 0o644))
			ranges := [][2]int{{0, rows}}
			if rows > 0 {
				r0 := rng.IntN(rows)
				ranges = append(ranges, [2]int{r0, 1 + rng.IntN(rows-r0)}, [2]int{rows - 1, 1})
			}
			for _, rg := range ranges {
				args := []string{name, strconv.Itoa(rg[0]), strconv.Itoa(rg[1])}
				out := string(run(t, bin, append([]string{"--rows", art}, args...)...))
				require.Equal(t, tritString(trits[rg[0]*cols:(rg[0]+rg[1])*cols])+"\n", out, "%s %s rows %v", codec, name, rg)
				out = string(run(t, bin, append(append([]string{"--matvec", art}, args...), xf)...))
				var got []int32
				for _, f := range strings.Fields(out) {
					v, err := strconv.ParseInt(f, 10, 32)
					require.NoError(t, err)
					got = append(got, int32(v))
				}
				want := matvecRef(trits, cols, rg[0], rg[1], x)
				// The Go kernel on the same payload (entropy: its base3
				// content) gives the same sums.
				kernel := make([]int32, rg[1])
				require.NoError(t, tritmat.MulInt8Rows(kernel, tritmat.Matrix{Codec: string(kcodec), Data: payload, Rows: rows, Cols: cols}, 0, x, 1, rg[0], rg[0]+rg[1]))
				if cols == 0 {
					kernel = want // no column: tritmat gives no sum, the C reader a 0 per row
				}
				require.Equal(t, want, kernel, "%s %s rows %v: tritmat", codec, name, rg)
				if len(want) == 0 {
					want = nil
				}
				require.Equal(t, want, got, "%s %s rows %v", codec, name, rg)
			}
		}
		require.NoError(t, a.Close())
	}
}

func int8Bytes(x []int8) []byte {
	b := make([]byte, len(x))
	for i, v := range x {
		b[i] = byte(v)
	}
	return b
}

// The library and the program compile as C99 without a warning under gcc
// and clang, with and without the entropy codec.
func TestStrictCompile(t *testing.T) {
	// The sanitizer builds of the other tests are gcc builds with these
	// flags too, with and without zstd.
	for _, b := range []struct {
		cc    string
		flags []string
	}{
		{"gcc", []string{"-O2", "-pedantic", "-DTKART_WITH_ZSTD"}},
		{"clang", []string{"-O2", "-pedantic", "-DTKART_WITH_ZSTD"}},
		{"clang", nil},
	} {
		bin := build(t, b.cc, b.flags...)
		out := run(t, bin, filepath.Join(vectorsDir, "ok-group.tkart"))
		require.Contains(t, string(out), "ok: format 1.0", "%s %v", b.cc, b.flags)
	}
}

// FuzzManifestDifferential gives the C reader and the Go reader the same
// manifest (in the sections of ok-bits2.tkart, with the trailer fixed) and
// requires the same outcome: the same class, or both valid with the same
// tensors. Differences allowed: this C reader's documented limits
// (numbers over 256 bytes, U+0000 in strings) and manifests the Go reader
// rejects without a class.
//
//	go test ./reader/ctest -run '^$' -fuzz FuzzManifestDifferential -fuzztime 60s
func FuzzManifestDifferential(f *testing.F) {
	bin := sanitized(f)
	base, err := os.ReadFile(filepath.Join(vectorsDir, "ok-bits2.tkart"))
	require.NoError(f, err)
	tr := base[len(base)-pack.TrailerLen:]
	m := binary.LittleEndian.Uint64(tr)
	orig := string(base[m : len(base)-pack.TrailerLen])
	f.Add([]byte(orig))
	f.Add([]byte(strings.Replace(orig, `"tool":"ternkit vectors"`, `"tool":"\ud83c\udf31"`, 1)))
	f.Add([]byte(strings.Replace(orig, `"shape":[2,7]`, `"shape":[2,7.0]`, 1)))
	f.Add([]byte(strings.Replace(orig, `"created"`, `"created"`, 1) + " "))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, body []byte) {
		path := filepath.Join(dir, "fuzz.tkart")
		require.NoError(t, os.WriteFile(path, manifestEdit(t, base, func(string) string { return string(body) }), 0o644))
		c := cRead(t, bin, path)[0]
		g := goRead(t, path)
		if strings.HasPrefix(g.Result, "error: ") || strings.Contains(c.Detail, "this reader's limit") {
			return
		}
		d := c.Detail
		c.Detail = ""
		require.Equal(t, g, c, "C reader said: %s", d)
	})
}

// The published vectors of the Go kernel (tritmat/testdata/mulint8_vectors.json,
// written for runtimes in other languages): the C reader's packed product
// gives every sum, groups and tokens included.
func TestMulInt8Vectors(t *testing.T) {
	bin := sanitized(t)
	b, err := os.ReadFile("../../tritmat/testdata/mulint8_vectors.json")
	require.NoError(t, err)
	var vs []struct {
		Name    string  `json:"name"`
		Codec   string  `json:"codec"`
		Rows    int     `json:"rows"`
		Cols    int     `json:"cols"`
		Group   int     `json:"group"`
		Payload string  `json:"payload_hex"`
		Tokens  int     `json:"tokens"`
		X       []int8  `json:"x"`
		Y       []int32 `json:"y"`
	}
	require.NoError(t, json.Unmarshal(b, &vs))
	require.NotEmpty(t, vs)
	for _, v := range vs {
		xs := make([]string, len(v.X))
		for i, x := range v.X {
			xs[i] = strconv.Itoa(int(x))
		}
		out := string(run(t, bin, "--mulint8", v.Codec, strconv.Itoa(v.Rows), strconv.Itoa(v.Cols), strconv.Itoa(v.Group),
			v.Payload, strconv.Itoa(v.Tokens), strings.Join(xs, ",")))
		var got []int32
		for _, f := range strings.Fields(out) {
			n, err := strconv.ParseInt(f, 10, 32)
			require.NoError(t, err)
			got = append(got, int32(n))
		}
		require.Equal(t, v.Y, got, v.Name)
	}
}

// tkart-check prints names from the file with control characters escaped,
// and exits 1 for an invalid artifact, 0 for a valid one.
func TestCheckOutput(t *testing.T) {
	bin := sanitized(t)
	cmd := exec.Command(bin, filepath.Join(vectorsDir, "ok-group.tkart"), filepath.Join(vectorsDir, "bad-companion-name-control.tkart"))
	out, err := cmd.Output()
	var ee *exec.ExitError
	require.ErrorAs(t, err, &ee)
	require.Equal(t, 1, ee.ExitCode())
	require.Contains(t, string(out), `NOTICE\x07`)
	for _, c := range out {
		require.False(t, c < 0x20 && c != '\n', "control byte 0x%02x in %q", c, out)
	}
	require.Contains(t, string(out), "ok-group.tkart: ok: format 1.0")
	require.Contains(t, string(out), "groups.w  ternary base3 [2 8] group:4 from F32  at 64+4 scales at 128+16")
}
