package main

import (
	"encoding/binary"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// The "size" line of the inspect goldens, worked by hand.
//
// Source (the safetensors layout of its published format description): 8
// length bytes, the JSON header below, 43 + 67 + 76 + 74 + 78 = 338
// characters padded with spaces to 344 (a multiple of 8, as writers pad),
// then 24 + 40 + 8 + 32 = 104 data bytes: 8 + 344 + 104 = 456 B.
//
// Artifact (pack/FORMAT.md): a 64-byte preamble; the four sections of 24,
// 2, 8 and 4 bytes each start on a 64-byte boundary, at 64, 128, 192 and
// 256, so the manifest starts at 320; the 64-byte trailer ends the file.
// The manifest's length L is the one number not worked by hand: it is read
// from the trailer (bytes 8 to 16 of the last 64). The line then reads
// (320 + L + 64) / 1024 KiB and (320 + L + 64) / 456 times larger.
func TestInspectVectorSizeLine(t *testing.T) {
	src, art := writeVector(t, t.TempDir())
	header := `{"__metadata__":{"model":"inspect-vector"},` + // 43
		`"embed.weight":{"dtype":"F32","shape":[3,2],"data_offsets":[0,24]},` + // 67
		`"layers.0.proj.weight":{"dtype":"F32","shape":[2,5],"data_offsets":[24,64]},` + // 76
		`"layers.0.norm.weight":{"dtype":"F16","shape":[4],"data_offsets":[64,72]},` + // 74
		`"layers.1.proj.weight":{"dtype":"BF16","shape":[4,4],"data_offsets":[72,104]}}` // 78
	require.Len(t, header, 338)
	s, err := os.ReadFile(src)
	require.NoError(t, err)
	require.Len(t, s, 456)
	require.Equal(t, uint64(344), binary.LittleEndian.Uint64(s))
	require.Equal(t, header+"      ", string(s[8:8+344]))

	a, err := os.ReadFile(art)
	require.NoError(t, err)
	tr := a[len(a)-64:]
	require.Equal(t, uint64(320), binary.LittleEndian.Uint64(tr[0:]), "manifest offset")
	l := binary.LittleEndian.Uint64(tr[8:])
	size := 320 + int(l) + 64
	require.Len(t, a, size)
	line := fmt.Sprintf("size             source 456 B, artifact %.1f KiB: %.2fx larger\n", float64(size)/1024, float64(size)/456)
	for _, golden := range []string{"inspect_vector.golden", "inspect_vector_sorted.golden"} {
		g, err := os.ReadFile(filepath.Join("testdata", golden))
		require.NoError(t, err)
		require.True(t, strings.Contains(string(g), line), "%s lacks %q", golden, line)
	}
}
