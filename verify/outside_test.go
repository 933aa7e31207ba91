package verify

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"os"
	"os/exec"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
	"ternkit/manifest"
	"ternkit/pack"
)

// The source hashes the manifest records: each source file's is what
// b3sum computes; each tensor's source span identity (format 1.4) is that
// of its bytes located by the safetensors header read here from the
// published format description (8-byte little-endian header length, the
// JSON header, data_offsets relative to the data section), not by
// ternkit's reader.
func TestSourceHashesAgreeWithB3sum(t *testing.T) {
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	run := func(args []string, stdin []byte) string {
		cmd := exec.Command(b3sum, append([]string{"--no-names"}, args...)...)
		cmd.Stdin = bytes.NewReader(stdin)
		out, err := cmd.Output()
		require.NoError(t, err)
		return strings.TrimSpace(string(out))
	}
	src, art, _ := bf16Fixture(t, t.TempDir(), pack.Base3)
	a, err := pack.Open(art)
	require.NoError(t, err)
	m := a.Manifest()
	a.Close()

	require.Len(t, m.Source.Files, 1)
	require.Equal(t, run([]string{src}, nil), m.Source.Files[0].BLAKE3, "the source file, read by b3sum itself")

	raw, err := os.ReadFile(src)
	require.NoError(t, err)
	n := binary.LittleEndian.Uint64(raw)
	var header map[string]json.RawMessage
	require.NoError(t, json.Unmarshal(raw[8:8+n], &header))
	data := raw[8+n:]
	require.Len(t, m.Tensors, 5)
	for _, e := range m.Tensors {
		var entry struct {
			DataOffsets [2]uint64 `json:"data_offsets"`
		}
		require.NoError(t, json.Unmarshal(header[e.Name], &entry), e.Name)
		require.NotEmpty(t, data[entry.DataOffsets[0]:entry.DataOffsets[1]], e.Name)
		start := int64(8 + n)
		a, b := start+int64(entry.DataOffsets[0]), start+int64(entry.DataOffsets[1])
		require.Equal(t, manifest.HexHash(convert.SpanIdentity(raw, a, b)), e.SourceSpan, e.Name)
		require.Empty(t, e.SourceBLAKE3, e.Name)
	}
}
