package main

import (
	"os"
	"path/filepath"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/require"

	"ternkit/manifest"
	"ternkit/pack"
)

// The demo release unpacks to a checkpoint that github.com/nlpodyssey/safetensors
// reads with the source's names, shapes and (for BF16) dtype; kept BF16
// tensors are the source's bytes.
func TestUnpackDemo(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	out := filepath.Join(dir, "scout-eval.safetensors")
	code, stdout, errOut := ternkit("unpack", art, "-o", out, "--dtype", "bf16")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, stdout, "as BF16")

	orig, err := st.Deserialize(readFile(t, src))
	require.NoError(t, err)
	got, err := st.Deserialize(readFile(t, out))
	require.NoError(t, err)
	require.ElementsMatch(t, orig.Names(), got.Names())
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	kept := 0
	for _, e := range a.Tensors() {
		o, _ := orig.Tensor(e.Name)
		g, ok := got.Tensor(e.Name)
		require.True(t, ok, e.Name)
		require.Equal(t, o.Shape(), g.Shape(), e.Name)
		require.Equal(t, "BF16", g.DType().String(), e.Name)
		if e.Kind == manifest.KindKept {
			require.Equal(t, o.Data(), g.Data(), "%s is kept: same bytes", e.Name)
			kept++
		}
	}
	require.Positive(t, kept)
}

func TestUnpackUsage(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"unpack", art}, "needs -o"},
		{[]string{"unpack", art, "-o", filepath.Join(dir, "x.safetensors"), "--dtype", "int8"}, `"int8"`},
		{[]string{"unpack", art, "-o", dir}, "is a directory"},
		{[]string{"unpack", filepath.Join(dir, "missing.tkart"), "-o", filepath.Join(dir, "x.safetensors")}, "missing.tkart"},
	}
	for _, c := range cases {
		code, _, errOut := ternkit(c.args...)
		require.Equal(t, exitInput, code, "%v", c.args)
		require.Contains(t, errOut, c.want, "%v", c.args)
	}
	require.NoFileExists(t, filepath.Join(dir, "x.safetensors"))

	// A corrupt section: exit 2 naming the tensor, nothing written.
	b := readFile(t, art)
	b[200] ^= 1
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	code, _, errOut := ternkit("unpack", bad, "-o", filepath.Join(dir, "x.safetensors"))
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "hash mismatch")
	require.Contains(t, errOut, `section "`)
	require.NoFileExists(t, filepath.Join(dir, "x.safetensors"))
}
