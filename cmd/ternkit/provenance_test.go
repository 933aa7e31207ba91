package main

import (
	"bytes"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/spf13/cobra"
	"github.com/stretchr/testify/require"

	"ternkit/pack"
)

// packOptions are the options a plain pack command uses.
func packOptions(t *testing.T) pack.Options {
	t.Helper()
	var rf recipeFlags
	rf.register(&cobra.Command{})
	opts, err := rf.options(&warnings{stderr: io.Discard})
	require.NoError(t, err)
	return opts
}

func readFile(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

// Packing the same checkpoint twice, to different names in different
// directories, gives identical bytes; the manifest records the policy and,
// only with SOURCE_DATE_EPOCH, the creation time.
func TestPackReproducible(t *testing.T) {
	src, _ := demoArtifact(t, t.TempDir())
	for _, epoch := range []string{"", "1700000000"} {
		t.Setenv("SOURCE_DATE_EPOCH", epoch)
		var arts [][]byte
		for _, name := range []string{"first.tkart", "again/second.tkart"} {
			out := filepath.Join(t.TempDir(), name)
			require.NoError(t, os.MkdirAll(filepath.Dir(out), 0o755))
			code, _, errOut := ternkit("pack", src, "-o", out)
			require.Equal(t, exitOK, code, errOut)
			arts = append(arts, readFile(t, out))
			a, err := pack.Open(out)
			require.NoError(t, err)
			m := a.Manifest()
			require.Equal(t, packOptions(t).Policy.Describe(), m.Policy)
			require.NotEmpty(t, m.Policy)
			if epoch == "" {
				require.Empty(t, m.Created)
			} else {
				// 1,700,000,000 s after the Unix epoch is 2023-11-14 22:13:20 UTC (common practice: date -u -d @1700000000).
				require.Equal(t, "2023-11-14T22:13:20Z", m.Created)
			}
			a.Close()
			code, shown, _ := ternkit("inspect", out)
			require.Equal(t, exitOK, code)
			require.Contains(t, shown, "policy           "+m.Policy[0])
			require.Equal(t, epoch != "", strings.Contains(shown, "created          2023-11-14T22:13:20Z"), shown)
		}
		require.True(t, bytes.Equal(arts[0], arts[1]), "SOURCE_DATE_EPOCH=%q: two packs differ", epoch)
	}
}

// A malformed SOURCE_DATE_EPOCH is a usage error naming the value; nothing
// is written. (The variable holds decimal seconds since the Unix epoch, as
// `date +%s` prints them; tools fail on a malformed value: common practice
// of reproducible builds, from memory.)
func TestPackBadSourceDateEpoch(t *testing.T) {
	dir := t.TempDir()
	for _, v := range []string{"yesterday", "1.5", "-1", "+5", "99999999999999"} {
		t.Setenv("SOURCE_DATE_EPOCH", v)
		out := filepath.Join(dir, "o.tkart")
		code, _, errOut := ternkit("pack", filepath.Join(dir, "missing.safetensors"), "-o", out)
		require.Equal(t, exitInput, code, v)
		require.Contains(t, errOut, `SOURCE_DATE_EPOCH "`+v+`"`)
		require.NoFileExists(t, out)
	}
}
