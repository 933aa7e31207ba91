package pack

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// Build refuses a destination that is one of its inputs (the source file,
// directly or through a symbolic link, or a companion), and leaves that
// input as it was.
func TestBuildRefusesOutputThatIsAnInput(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	cfg := filepath.Join(dir, "config.json")
	require.NoError(t, os.WriteFile(cfg, []byte(`{"hidden_size": 4}`), 0o644))
	link := filepath.Join(dir, "link.safetensors")
	require.NoError(t, os.Symlink("src.safetensors", link))
	srcBytes, err := os.ReadFile(src)
	require.NoError(t, err)

	for _, dst := range []string{src, link, cfg} {
		t.Run(filepath.Base(dst), func(t *testing.T) {
			s, err := convert.Open(src)
			require.NoError(t, err)
			defer s.Close()
			_, err = Build(s, dst, Options{Codec: Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
				Companions: []Companion{{Name: "config.json", Path: cfg}}})
			require.ErrorIs(t, err, ErrOutputIsInput)
			require.Contains(t, err.Error(), dst)
			got, err := os.ReadFile(src)
			require.NoError(t, err)
			require.Equal(t, srcBytes, got, "the source is unchanged")
			got, err = os.ReadFile(cfg)
			require.NoError(t, err)
			require.Equal(t, `{"hidden_size": 4}`, string(got), "the companion is unchanged")
		})
	}
	// a new file beside the inputs is fine
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = Build(s, filepath.Join(dir, "out"+Extension), Options{Codec: Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
		Companions: []Companion{{Name: "config.json", Path: cfg}}})
	require.NoError(t, err)
}
