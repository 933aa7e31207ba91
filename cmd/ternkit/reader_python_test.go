package main

import (
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
	"testing"

	"github.com/stretchr/testify/require"

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
}

type readTensor struct {
	Name          string  `json:"name"`
	Kind          string  `json:"kind"`
	Codec         string  `json:"codec"`
	Shape         []int64 `json:"shape"`
	Scale         float64 `json:"scale,omitempty"`
	Counts        []int64 `json:"counts,omitempty"`
	TritsSHA256   string  `json:"trits_sha256,omitempty"`
	Float32SHA256 string  `json:"float32_sha256,omitempty"`
	KeptSHA256    string  `json:"kept_sha256,omitempty"`
	Trits         string  `json:"trits,omitempty"`
	Hex           string  `json:"hex,omitempty"`
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
	requireTool(t, "b3sum")
	requireTool(t, "zstd")
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
		if e.Kind == manifest.KindKept {
			p, err := tn.VerifiedPayload()
			require.NoError(t, err)
			rt.KeptSHA256 = sha256Hex(p)
			if withTrits {
				rt.Hex = hex.EncodeToString(p)
			}
			r.Tensors = append(r.Tensors, rt)
			continue
		}
		trits := make([]int8, tn.Len())
		require.NoError(t, tn.DecodeTrits(trits))
		vals := make([]float32, tn.Len())
		require.NoError(t, tn.DecodeFloat32(vals))
		tb := make([]byte, len(trits))
		fb := make([]byte, 4*len(vals))
		for i, v := range trits {
			tb[i] = byte(v)
			binary.LittleEndian.PutUint32(fb[4*i:], math.Float32bits(vals[i]))
		}
		rt.Scale = float64(e.Scale)
		rt.Counts = []int64{e.Trits.Neg, e.Trits.Zero, e.Trits.Pos}
		rt.TritsSHA256, rt.Float32SHA256 = sha256Hex(tb), sha256Hex(fb)
		if withTrits {
			s := make([]byte, len(trits))
			for i, v := range trits {
				s[i] = "-0+"[v+1]
			}
			rt.Trits = string(s)
		}
		r.Tensors = append(r.Tensors, rt)
	}
	return r
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
			Name  string `json:"name"`
			Trits string `json:"trits"`
			Hex   string `json:"hex"`
		} `json:"tensors"`
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
		}
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
		require.Len(t, r.Tensors, 3+9*demoLayers, files[i]) // embed, final norm, head; 9 per block
	}
}
