package diff

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/pack"
)

// asOlder rewrites the artifact at path as a writer of source_blake3 (the
// only kind of formats 1.0 to 1.3) records it: here a stand-in hash per
// tensor instead of source_span.
func asOlder(t *testing.T, path, out string) *pack.Artifact {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	tr := b[len(b)-64:]
	off, n := binary.LittleEndian.Uint64(tr[0:]), binary.LittleEndian.Uint64(tr[8:])
	dec := json.NewDecoder(bytes.NewReader(b[off : off+n]))
	dec.UseNumber()
	var m map[string]any
	require.NoError(t, dec.Decode(&m))
	for _, x := range m["tensors"].([]any) {
		x := x.(map[string]any)
		x["source_blake3"] = x["source_span"]
		delete(x, "source_span")
	}
	body, err := json.Marshal(m)
	require.NoError(t, err)
	trailer := bytes.Clone(tr)
	binary.LittleEndian.PutUint64(trailer[8:], uint64(len(body)))
	sum := blake3.Sum256(body)
	copy(trailer[16:], sum[:])
	head := bytes.Clone(b[:off])
	require.NoError(t, os.WriteFile(out, append(append(head, body...), trailer...), 0o644))
	a, err := pack.Open(out)
	require.NoError(t, err)
	t.Cleanup(func() { a.Close() })
	return a
}

// Source identities are compared when both artifacts record the same kind:
// span identities change with a tensor's place in the file (the same bytes
// after another tensor), and artifacts of different kinds say the sources
// were not compared.
func TestCompareSourceKinds(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(5, 6))
	w := convert.WriteTensor{Name: "w", DType: "F32", Shape: []int64{6, 10}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 60))}
	extra := convert.WriteTensor{Name: "a.extra", DType: "F32", Shape: []int64{4}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 4))}
	a := build(t, dir, "a", release{tensors: []convert.WriteTensor{w}, codec: pack.Base3})
	moved := build(t, dir, "moved", release{tensors: []convert.WriteTensor{extra, w}, codec: pack.Base3})

	r, err := Compare(a, moved)
	require.NoError(t, err)
	require.Equal(t, SourceSpan, r.Compared.Source)
	require.Contains(t, r.Compared.Summary, "span identity")
	require.Len(t, r.Changed, 1)
	require.Equal(t, "w", r.Changed[0].Name)
	require.Equal(t, []string{AspectSource}, r.Changed[0].Changed, "the same bytes at another place")

	older := asOlder(t, filepath.Join(dir, "a"+pack.Extension), filepath.Join(dir, "older"+pack.Extension))
	r, err = Compare(older, moved)
	require.NoError(t, err)
	require.Equal(t, SourceNone, r.Compared.Source)
	require.True(t, strings.Contains(r.Compared.Summary, "source tensors not compared: A records source_blake3, B source_span"), r.Compared.Summary)
	require.Empty(t, r.Changed, "not compared, not changed")

	r, err = Compare(older, older)
	require.NoError(t, err)
	require.Equal(t, SourceBLAKE3, r.Compared.Source)
	require.True(t, r.Same())
}
