package verify

import (
	"encoding/binary"
	"os"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/pack"
)

func TestRunProgress(t *testing.T) {
	src, art := fixture(t, t.TempDir(), pack.Base3, nil)
	a, err := pack.Open(art)
	require.NoError(t, err)
	var sections int64
	for _, e := range a.Tensors() {
		sections += e.Section.Length
	}
	a.Close()
	// The source's data section: file size minus the 8-byte header length
	// and the header (published safetensors format description).
	b, err := os.ReadFile(src)
	require.NoError(t, err)
	sourceData := int64(len(b)) - 8 - int64(binary.LittleEndian.Uint64(b))

	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	cases := []struct {
		name  string
		opts  Options
		calls int
		total int64
	}{
		{"alone", Options{}, 1 + 3, sections},
		{"against source", Options{Source: s}, 1 + 3 + 3, sections + sourceData},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var done, total []int64
			c.opts.Progress = func(d, n int64) { done, total = append(done, d), append(total, n) }
			rep, err := Run(art, c.opts)
			require.NoError(t, err)
			require.True(t, rep.OK())
			require.Len(t, done, c.calls)
			require.Equal(t, int64(0), done[0])
			for i := range done {
				require.Equal(t, c.total, total[i])
				if i > 0 {
					require.Greater(t, done[i], done[i-1])
				}
			}
			require.Equal(t, c.total, done[len(done)-1])
		})
	}
}
