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
