package main

import (
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// writeLargeCheckpoint streams an F32 checkpoint of n tensors of rows×cols
// to path, one tensor in memory at a time, and returns its size in bytes.
func writeLargeCheckpoint(t *testing.T, path string, n, rows, cols int) int64 {
	t.Helper()
	tensors := make([]convert.WriteTensor, n)
	for i := range tensors {
		tensors[i] = convert.WriteTensor{Name: fmt.Sprintf("blocks.%d.mlp.up.weight", i), DType: "F32", Shape: []int64{int64(rows), int64(cols)}}
	}
	w, err := convert.CreateFile(path, tensors, nil)
	require.NoError(t, err)
	defer w.Abort()
	data := make([]byte, 4*rows*cols)
	for i := 0; i < rows*cols; i++ {
		binary.LittleEndian.PutUint32(data[4*i:], math.Float32bits(float32(i%17)-8.5))
	}
	for range tensors {
		require.NoError(t, w.WriteTensor(data))
	}
	require.NoError(t, w.Commit())
	st, err := os.Stat(path)
	require.NoError(t, err)
	return st.Size()
}

// dirNames lists the names in dir.
func dirNames(t *testing.T, dir string) []string {
	t.Helper()
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	var names []string
	for _, e := range entries {
		names = append(names, e.Name())
	}
	return names
}

// A pack killed with SIGKILL while it writes leaves nothing at the
// destination; the next pack to the same destination removes the killed
// run's temporary file and leaves only the artifact.
func TestPackKilledLeavesNothing(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and packs 128 MiB")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "ternkit")
	build := exec.Command("go", "build", "-o", bin, ".")
	out, err := build.CombinedOutput()
	require.NoError(t, err, "%s", out)
	src := filepath.Join(dir, "big.safetensors")
	writeLargeCheckpoint(t, src, 32, 1024, 1024) // 128 MiB of F32
	outDir := filepath.Join(dir, "out")
	require.NoError(t, os.Mkdir(outDir, 0o755))
	dst := filepath.Join(outDir, "big.tkart")

	// every tensor kept: 128 MiB to write, more than the runs the artifact
	// is staged in, so that the temporary file grows while pack runs
	cmd := exec.Command(bin, "pack", src, "-o", dst, "--quiet", "--rule", "*=keep")
	require.NoError(t, cmd.Start())
	// Kill once the temporary file holds data: mid-write, before the rename.
	deadline := time.Now().Add(15 * time.Second)
	var tmp string
	for tmp == "" && time.Now().Before(deadline) {
		for _, name := range dirNames(t, outDir) {
			if st, err := os.Stat(filepath.Join(outDir, name)); err == nil && strings.HasPrefix(name, ".big.tkart.tmp-") && st.Size() > 0 {
				tmp = name
			}
		}
		time.Sleep(5 * time.Millisecond)
	}
	require.NoError(t, cmd.Process.Signal(syscall.SIGKILL))
	err = cmd.Wait()
	require.NotEmpty(t, tmp, "pack never wrote its temporary file")
	var exitErr *exec.ExitError
	require.ErrorAs(t, err, &exitErr, "pack finished before the kill")
	require.Equal(t, syscall.SIGKILL, exitErr.Sys().(syscall.WaitStatus).Signal())
	require.NoFileExists(t, dst)
	require.Equal(t, []string{tmp}, dirNames(t, outDir), "the killed run left only its temporary file")

	small := filepath.Join(dir, "small.safetensors")
	writeLargeCheckpoint(t, small, 2, 16, 16)
	again := exec.Command(bin, "pack", small, "-o", dst, "--quiet")
	out, err = again.CombinedOutput()
	require.NoError(t, err, "%s", out)
	require.Equal(t, []string{"big.tkart"}, dirNames(t, outDir), "the next pack removed the stale temporary file")
}

// Packing onto a filesystem too small for the artifact fails with exit 2,
// a message naming the destination, and nothing left behind. It mounts a
// 256 KiB tmpfs, which needs root; outside CI it skips otherwise.
func TestPackDiskFull(t *testing.T) {
	if os.Geteuid() != 0 {
		if os.Getenv("CI") != "" {
			t.Fatal("the disk-full test needs root to mount a tmpfs, and CI runs as root")
		}
		t.Skip("needs root to mount a small tmpfs")
	}
	dir := t.TempDir()
	small := filepath.Join(dir, "small")
	require.NoError(t, os.Mkdir(small, 0o755))
	if out, err := exec.Command("mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs", small).CombinedOutput(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("mount a tmpfs: %v: %s", err, out)
		}
		t.Skipf("cannot mount a tmpfs here: %v: %s", err, out)
	}
	t.Cleanup(func() {
		if out, err := exec.Command("umount", small).CombinedOutput(); err != nil {
			t.Errorf("umount %s: %v: %s", small, err, out)
		}
	})
	src := filepath.Join(dir, "src.safetensors")
	writeLargeCheckpoint(t, src, 16, 256, 512) // 8 MiB of F32: about 420 KiB of trits
	dst := filepath.Join(small, "model.tkart")
	code, stdout, stderr := ternkit("pack", src, "-o", dst, "--quiet", "--codec", "bits2")
	require.Equal(t, exitInput, code, "stdout:\n%s\nstderr:\n%s", stdout, stderr)
	require.Contains(t, stderr, dst)
	require.Contains(t, stderr, "no space left on device")
	require.Empty(t, dirNames(t, small), "no artifact and no temporary file")
}
