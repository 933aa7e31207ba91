//go:build unix

package main

import (
	"encoding/binary"
	"math"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/manifest"
)

// smallCheckpoint writes a two-tensor F32 checkpoint and returns its path.
func smallCheckpoint(t *testing.T, dir string) string {
	t.Helper()
	w := make([]byte, 0, 4*64)
	for i := range 64 {
		w = binary.LittleEndian.AppendUint32(w, math.Float32bits(float32(i%9)-4.25))
	}
	src := filepath.Join(dir, "seedvault.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{8, 8}, Data: w},
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{8}, Data: w[:32]},
	}, map[string]string{"vault": "fernmoss"}))
	return src
}

// packSmall packs smallCheckpoint into dir and returns both paths.
func packSmall(t *testing.T, dir string) (src, art string) {
	t.Helper()
	src = smallCheckpoint(t, dir)
	art = filepath.Join(dir, "seedvault.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "-q")
	require.Equal(t, exitOK, code, "stdout:\n%s\nstderr:\n%s", out, errOut)
	return src, art
}

// within runs fn and fails the test when it has not returned after a
// generous while: a reader blocked on a named pipe never returns.
func within(t *testing.T, fn func()) {
	t.Helper()
	done := make(chan struct{})
	go func() { defer close(done); fn() }()
	select {
	case <-done:
	case <-time.After(30 * time.Second):
		t.Fatal("the command blocked")
	}
}

// A named pipe as the artifact, the checkpoint, a shard, the policy or the
// budget is refused with exit 2 before anything reads from it.
func TestNamedPipesAreRefused(t *testing.T) {
	dir := t.TempDir()
	src, art := packSmall(t, dir)
	fifo := filepath.Join(dir, "pipe")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	fifoArt := filepath.Join(dir, "pipe.tkart")
	require.NoError(t, syscall.Mkfifo(fifoArt, 0o600))
	fifoSrc := filepath.Join(dir, "pipe.safetensors")
	require.NoError(t, syscall.Mkfifo(fifoSrc, 0o600))
	sharded := filepath.Join(dir, "sharded")
	require.NoError(t, os.Mkdir(sharded, 0o755))
	require.NoError(t, os.WriteFile(filepath.Join(sharded, "model.safetensors.index.json"),
		[]byte(`{"weight_map":{"a":"model-00001-of-00001.safetensors"}}`), 0o644))
	require.NoError(t, syscall.Mkfifo(filepath.Join(sharded, "model-00001-of-00001.safetensors"), 0o600))
	out := filepath.Join(dir, "out.tkart")
	cases := [][]string{
		{"verify", fifoArt},
		{"verify", art, "--against", fifoSrc},
		{"inspect", fifoArt},
		{"pack", fifoSrc, "-o", out},
		{"pack", sharded, "-o", out},
		{"pack", src, "-o", out, "--policy", fifo},
		{"verify", art, "--budget", fifo},
	}
	for _, args := range cases {
		within(t, func() {
			code, stdout, stderr := ternkit(append(args, "-q")...)
			require.Equal(t, exitInput, code, "%v\nstdout:\n%s\nstderr:\n%s", args, stdout, stderr)
			require.Contains(t, stderr, "not a regular file (a named pipe)", args)
		})
		require.NoFileExists(t, out)
	}
}

// fileBytes reads a whole file.
func fileBytes(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

// No command writes its output over one of its inputs, over the source an
// artifact records, or over something that is not a regular file: each is
// exit 2 with the inputs unchanged and nothing written.
func TestOutputsNeverDestroyInputs(t *testing.T) {
	dir := t.TempDir()
	src, art := packSmall(t, dir)
	code, out, errOut := ternkit("keygen", "-o", filepath.Join(dir, "release"))
	require.Equal(t, exitOK, code, out+errOut)
	key := filepath.Join(dir, "release.key")
	link := filepath.Join(dir, "link.tkart")
	require.NoError(t, os.Symlink(art, link))
	fifo := filepath.Join(dir, "pipe.tkart")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	srcBytes, artBytes, keyBytes := fileBytes(t, src), fileBytes(t, art), fileBytes(t, key)
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"pack", src, "-o", src}, "is the same file as an input"},
		{[]string{"pack", dir, "-o", src}, "is the same file as an input"},
		{[]string{"pack", src, "-o", "/dev/null"}, "exists and is not a regular file (a character device)"},
		{[]string{"pack", src, "-o", fifo}, "exists and is not a regular file (a named pipe)"},
		{[]string{"unpack", art, "-o", art}, "is the same file as an input"},
		{[]string{"unpack", art, "-o", src}, "the source checkpoint this artifact was packed from"},
		{[]string{"unpack", link, "-o", art}, "is the same file as an input"},
		{[]string{"report", art, "-o", art}, "is the same file as an input"},
		{[]string{"report", art, "-o", link}, "is the same file as an input"},
		{[]string{"report", art, "-o", fifo}, "(a named pipe)"},
		{[]string{"sign", art, "--key", key, "-o", art}, "is an input of this command"},
		{[]string{"sign", art, "--key", key, "-o", key}, "is an input of this command"},
	}
	for _, c := range cases {
		within(t, func() {
			code, stdout, stderr := ternkit(append(c.args, "-q")...)
			require.Equal(t, exitInput, code, "%v\nstdout:\n%s\nstderr:\n%s", c.args, stdout, stderr)
			require.Contains(t, stderr, c.want, c.args)
		})
		require.Equal(t, srcBytes, fileBytes(t, src), c.args)
		require.Equal(t, artBytes, fileBytes(t, art), c.args)
		require.Equal(t, keyBytes, fileBytes(t, key), c.args)
		fi, err := os.Lstat(fifo)
		require.NoError(t, err)
		require.Equal(t, os.ModeNamedPipe, fi.Mode().Type(), "the named pipe is still one")
		entries, err := os.ReadDir(dir)
		require.NoError(t, err)
		for _, e := range entries {
			require.NotContains(t, e.Name(), ".tmp-", "no temporary file is left")
		}
	}
}

// New outputs take the umask; a replaced output keeps its mode.
func TestOutputModes(t *testing.T) {
	dir := t.TempDir()
	src := smallCheckpoint(t, dir)
	old := syscall.Umask(0o077)
	defer syscall.Umask(old)
	art := filepath.Join(dir, "private.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "-q")
	require.Equal(t, exitOK, code, out+errOut)
	mode := func(p string) os.FileMode {
		fi, err := os.Stat(p)
		require.NoError(t, err)
		return fi.Mode().Perm()
	}
	require.Equal(t, os.FileMode(0o600), mode(art), "umask 077")
	page := filepath.Join(dir, "page.html")
	code, _, errOut = ternkit("report", art, "-o", page)
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, os.FileMode(0o600), mode(page), "umask 077")

	syscall.Umask(0o022)
	code, _, errOut = ternkit("pack", src, "-o", art, "-q", "--codec", "bits2")
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, os.FileMode(0o600), mode(art), "a 0600 artifact replaced stays 0600")
	require.NoError(t, os.Chmod(page, 0o640))
	code, _, errOut = ternkit("report", art, "-o", page)
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, os.FileMode(0o640), mode(page))
	fresh := filepath.Join(dir, "fresh.tkart")
	code, _, errOut = ternkit("pack", src, "-o", fresh, "-q")
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, os.FileMode(0o644), mode(fresh), "umask 022")
}

// Control characters in tensor names and metadata never reach the
// terminal raw: inspect, diff and verify's messages show them escaped.
func TestControlCharactersEscaped(t *testing.T) {
	dir := t.TempDir()
	w := make([]byte, 0, 4*64)
	for i := range 64 {
		w = binary.LittleEndian.AppendUint32(w, math.Float32bits(float32(i%7)-3.5))
	}
	evil := "blocks.0\x1b[2J\rFAKE\u009b.weight"
	src := filepath.Join(dir, "evil.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: evil, DType: "F32", Shape: []int64{8, 8}, Data: w},
	}, map[string]string{"note": "\x1b]0;title\x07"}))
	art := filepath.Join(dir, "evil.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "-q")
	require.Equal(t, exitOK, code, out+errOut)
	other := filepath.Join(dir, "other.tkart")
	code, out, errOut = ternkit("pack", smallCheckpoint(t, dir), "-o", other, "-q")
	require.Equal(t, exitOK, code, out+errOut)
	runs := [][]string{
		{"inspect", art},
		{"diff", other, art},
		{"diff", art, other},
		{"verify", art, "--max-rel-rmse", "0.01"},
		{"inspect", art, "--tensor", "nothing*"},
	}
	for _, args := range runs {
		_, stdout, stderr := ternkit(args...)
		for _, s := range []string{stdout, stderr} {
			for _, c := range []string{"\x1b", "\r", "\u009b", "\x07"} {
				require.NotContains(t, s, c, "%v printed a raw control character:\n%q", args, s)
			}
		}
		require.Contains(t, stdout+stderr, `\x1b[2J\rFAKE\u009b`, args)
	}
}

// An epsilon outside (0, 1e-2] is a usage error: with 1e30 every trit
// would be 0 and the bound would still "hold".
func TestPackRefusesEpsilonOutOfRange(t *testing.T) {
	dir := t.TempDir()
	src := smallCheckpoint(t, dir)
	out := filepath.Join(dir, "out.tkart")
	for _, eps := range []string{"1e30", "0.0101", "0", "-1e-5"} {
		code, stdout, stderr := ternkit("pack", src, "-o", out, "--epsilon", eps, "-q")
		require.Equal(t, exitInput, code, stdout)
		require.Contains(t, stderr, "(0, 0.01]", eps)
		require.NoFileExists(t, out)
	}
	code, _, stderr := ternkit("pack", src, "-o", out, "--epsilon", "1e-2", "-q")
	require.Equal(t, exitOK, code, stderr)
}

// rewriteArtifact decodes the artifact's manifest, edits it and writes the
// artifact back with a consistent trailer.
func rewriteArtifact(t *testing.T, art string, edit func(m *manifest.Manifest)) string {
	t.Helper()
	good := fileBytes(t, art)
	m, _, off := goodManifest(good)
	edit(m)
	body, err := manifest.Encode(m)
	require.NoError(t, err)
	out := filepath.Join(t.TempDir(), "forged.tkart")
	require.NoError(t, os.WriteFile(out, withManifest(good, good[:off], body), 0o644))
	return out
}

// Forged manifest fields that every hash still covers pass verify alone
// and fail verify --against with exit 1, naming tensor and field.
func TestVerifyAgainstNamesForgedFields(t *testing.T) {
	dir := t.TempDir()
	src, art := packSmall(t, dir)
	cases := []struct {
		edit func(m *manifest.Manifest)
		want string
	}{
		{func(m *manifest.Manifest) { m.Tensors[1].Shape = []int64{2, 4} }, `FAIL manifest_field "blocks.0.norm.weight": shape: manifest records [2 4]`},
		{func(m *manifest.Manifest) { m.Tensors[1].SourceDType, m.Tensors[1].DType = "I32", "I32" }, `FAIL manifest_field "blocks.0.norm.weight": source_dtype: manifest records "I32"`},
		{func(m *manifest.Manifest) { m.Source.Metadata["vault"] = "elsewhere" }, `FAIL manifest_field: source.metadata: key "vault" is "elsewhere"`},
		{func(m *manifest.Manifest) { m.Source.Files[0].Name = "other.safetensors" }, `FAIL manifest_field: source.files: file 0 is named "other.safetensors"`},
	}
	for _, c := range cases {
		forged := rewriteArtifact(t, art, c.edit)
		code, out, errOut := ternkit("verify", forged, "-q")
		require.Equal(t, exitOK, code, "consistent on its own: %s%s", out, errOut)
		code, out, errOut = ternkit("verify", forged, "--against", src, "-q")
		require.Equal(t, exitFailed, code, out)
		require.Contains(t, errOut, c.want, "under -q a failed verify prints its failures on stderr")
	}
}
