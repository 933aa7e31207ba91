package main

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/require"

	"ternkit/pack"
)

// numpyCheckpoint reads a checkpoint directory (one file, or an index and
// its shards) by the published safetensors layout with numpy (8-byte
// little-endian header length, JSON header, data), decoding every F32
// tensor to an array of its shape, and prints {name: sha256 of its data}.
const numpyCheckpoint = `
import hashlib, json, os, struct, sys
import numpy as np
d = sys.argv[1]
idx = os.path.join(d, "model.safetensors.index.json")
files = sorted(set(json.load(open(idx))["weight_map"].values())) if os.path.exists(idx) else ["model.safetensors"]
out = {}
for f in files:
    b = open(os.path.join(d, f), "rb").read()
    n = struct.unpack_from("<Q", b, 0)[0]
    h = json.loads(b[8:8 + n])
    h.pop("__metadata__", None)
    for name, t in h.items():
        lo, hi = t["data_offsets"]
        raw = b[8 + n + lo:8 + n + hi]
        if t["dtype"] == "F32":
            a = np.frombuffer(raw, dtype="<f4").reshape(t["shape"])
            raw = a.tobytes()
        assert name not in out, name
        out[name] = hashlib.sha256(raw).hexdigest()
json.dump(out, sys.stdout)
`

func sha256Of(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// The demo release unpacks to a checkpoint directory, in one file or in
// shards, that github.com/nlpodyssey/safetensors and a numpy reader both
// read with every tensor, and whose companions are the source directory's
// files byte for byte.
func TestUnpackDir(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	outs := t.TempDir()
	one, sharded := filepath.Join(outs, "scout-eval"), filepath.Join(outs, "scout-eval-sharded")
	code, _, errOut := ternkit("unpack", art, "-o", one)
	require.Equal(t, exitOK, code, errOut)
	code, _, errOut = ternkit("unpack", art, "-o", sharded, "--shard-size", "1MiB")
	require.Equal(t, exitOK, code, errOut)

	// the single file: the source's names and shapes
	orig, err := st.Deserialize(readFile(t, src))
	require.NoError(t, err)
	got, err := st.Deserialize(readFile(t, filepath.Join(one, pack.UnpackedWeights)))
	require.NoError(t, err)
	require.ElementsMatch(t, orig.Names(), got.Names())
	want := map[string]string{}
	for _, name := range got.Names() {
		o, _ := orig.Tensor(name)
		g, _ := got.Tensor(name)
		require.Equal(t, o.Shape(), g.Shape(), name)
		want[name] = sha256Of(g.Data())
	}

	// the shards: each read by the reference library, together the same
	// tensors with the same bytes, as the index says
	var idx struct {
		Metadata  map[string]int64  `json:"metadata"`
		WeightMap map[string]string `json:"weight_map"`
	}
	require.NoError(t, json.Unmarshal(readFile(t, filepath.Join(sharded, pack.UnpackedIndex)), &idx))
	shards := map[string]bool{}
	var total int64
	fromShards := map[string]string{}
	for name, file := range idx.WeightMap {
		shards[file] = true
		s, err := st.Deserialize(readFile(t, filepath.Join(sharded, file)))
		require.NoError(t, err, file)
		tn, ok := s.Tensor(name)
		require.True(t, ok, "%s in %s", name, file)
		fromShards[name] = sha256Of(tn.Data())
		total += int64(len(tn.Data()))
	}
	require.Greater(t, len(shards), 2, "2.x MiB of F32 weights in 1 MiB shards")
	require.Equal(t, want, fromShards)
	require.Equal(t, total, idx.Metadata["total_size"])

	// companions, byte for byte, in both
	for _, out := range []string{one, sharded} {
		for _, name := range []string{"config.json", demoVocabFile} {
			require.Equal(t, readFile(t, filepath.Join(dir, name)), readFile(t, filepath.Join(out, name)), "%s/%s", out, name)
		}
	}
	entries, err := os.ReadDir(one)
	require.NoError(t, err)
	require.Len(t, entries, 3, "weights and two companions, no temporary file")

	// numpy reads both layouts to the same tensors
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s with numpy not found: CI must install python3-numpy", py)
		}
		t.Skipf("%s with numpy not found; install python3-numpy to run the numpy check", py)
	}
	for _, out := range []string{one, sharded} {
		b, err := exec.Command(py, "-c", numpyCheckpoint, out).Output()
		require.NoError(t, err, out)
		var np map[string]string
		require.NoError(t, json.Unmarshal(b, &np))
		require.Equal(t, want, np, out)
	}
}

// A destination that holds files is refused and left alone; a companion
// cannot land outside the directory (its name is a base name).
func TestUnpackDirRefused(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	busy := t.TempDir()
	require.NoError(t, os.WriteFile(filepath.Join(busy, "notes.txt"), []byte("keep me"), 0o644))
	code, _, errOut := ternkit("unpack", art, "-o", busy)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "not empty")
	entries, err := os.ReadDir(busy)
	require.NoError(t, err)
	require.Len(t, entries, 1)

	code, _, errOut = ternkit("unpack", art, "-o", filepath.Join(dir, "x.safetensors"), "--shard-size", "1MB")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "-o DIR")
	code, _, errOut = ternkit("unpack", art, "-o", filepath.Join(dir, "eval"), "--shard-size", "-5")
	require.Equal(t, exitInput, code)
	require.True(t, strings.Contains(errOut, "--shard-size"), errOut)
	require.NoDirExists(t, filepath.Join(dir, "eval"))

	// a corrupt section halfway: nothing at the destination, no temporary
	// directory beside it
	b := readFile(t, art)
	a, err := pack.Open(art)
	require.NoError(t, err)
	last := a.Tensors()[len(a.Tensors())-1].Section
	a.Close()
	b[last.Offset] ^= 1
	bad := filepath.Join(t.TempDir(), "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	parent := t.TempDir()
	code, _, errOut = ternkit("unpack", bad, "-o", filepath.Join(parent, "eval"))
	require.Equal(t, exitFailed, code, "a corrupt artifact: exit 1")
	require.Contains(t, errOut, "hash mismatch")
	entries, err = os.ReadDir(parent)
	require.NoError(t, err)
	require.Empty(t, entries)
}
