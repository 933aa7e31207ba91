package pack

import (
	"encoding/binary"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// progressLog records every Progress call.
type progressLog struct{ done, total []int64 }

func (p *progressLog) record(done, total int64) {
	p.done = append(p.done, done)
	p.total = append(p.total, total)
}

// safetensorsDataBytes is the length of a safetensors file's data section:
// file size minus the 8-byte little-endian header length and the header
// (published safetensors format description).
func safetensorsDataBytes(t *testing.T, path string) int64 {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return int64(len(b)) - 8 - int64(binary.LittleEndian.Uint64(b))
}

func TestBuildProgress(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	var log progressLog
	_, err = Build(s, filepath.Join(dir, "p"+Extension), Options{Codec: Base3, Recipe: convert.DefaultRecipe(), Progress: log.record})
	require.NoError(t, err)

	want := safetensorsDataBytes(t, src)
	require.Len(t, log.done, len(s.Tensors)+1, "once before the first tensor, once after each")
	require.Equal(t, int64(0), log.done[0])
	for i := range log.done {
		require.Equal(t, want, log.total[i], "call %d", i)
		if i > 0 {
			require.GreaterOrEqual(t, log.done[i], log.done[i-1], "call %d", i)
		}
	}
	require.Equal(t, want, log.done[len(log.done)-1])
}
