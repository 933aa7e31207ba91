package main

import (
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/require"

	"ternkit/manifest"
	"ternkit/pack"
)

// The demo release unpacks to a checkpoint that github.com/nlpodyssey/safetensors
// reads with the source's names and shapes, in the dtype of a float tensor
// kept byte for byte, which comes out as the source's bytes.
func TestUnpackDemo(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	dtype := ""
	for _, e := range a.Tensors() {
		if e.Kind == manifest.KindKept && e.DType == e.SourceDType && slices.Contains(pack.UnpackDTypes, e.DType) {
			dtype = e.DType
			break
		}
	}
	require.NotEmpty(t, dtype, "the demo keeps float tensors")
	out := filepath.Join(dir, "scout-eval.safetensors")
	code, stdout, errOut := ternkit("unpack", art, "-o", out, "--dtype", strings.ToLower(dtype))
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, stdout, "as "+dtype)

	orig, err := st.Deserialize(readFile(t, src))
	require.NoError(t, err)
	got, err := st.Deserialize(readFile(t, out))
	require.NoError(t, err)
	require.ElementsMatch(t, orig.Names(), got.Names())
	kept := 0
	for _, e := range a.Tensors() {
		o, _ := orig.Tensor(e.Name)
		g, ok := got.Tensor(e.Name)
		require.True(t, ok, e.Name)
		require.Equal(t, o.Shape(), g.Shape(), e.Name)
		want := dtype
		if e.Kind == manifest.KindKept && !slices.Contains(pack.UnpackDTypes, e.DType) {
			want = e.DType // integers stay as they are
		}
		require.Equal(t, want, g.DType().String(), e.Name)
		if e.Kind == manifest.KindKept && e.SourceDType == dtype && e.DType == dtype {
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
		{[]string{"unpack", art, "-o", dir}, "not empty"},
		{[]string{"unpack", filepath.Join(dir, "missing.tkart"), "-o", filepath.Join(dir, "x.safetensors")}, "missing.tkart"},
	}
	for _, c := range cases {
		code, _, errOut := ternkit(c.args...)
		require.Equal(t, exitInput, code, "%v", c.args)
		require.Contains(t, errOut, c.want, "%v", c.args)
	}
	require.NoFileExists(t, filepath.Join(dir, "x.safetensors"))

	// A corrupt section: exit 1 (corrupt, as for verify) naming the
	// tensor, nothing written.
	b := readFile(t, art)
	b[200] ^= 1
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	code, _, errOut := ternkit("unpack", bad, "-o", filepath.Join(dir, "x.safetensors"))
	require.Equal(t, exitFailed, code)
	require.Contains(t, errOut, "hash mismatch")
	require.Contains(t, errOut, `section "`)
	require.NoFileExists(t, filepath.Join(dir, "x.safetensors"))
}
