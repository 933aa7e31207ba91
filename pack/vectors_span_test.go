package pack

import (
	"bytes"
	"flag"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// The vectors of the source span identity (format 1.4) are added beside
// the others without writing any of them anew:
// `go test ./pack -run TestVectorsSpan -add-vectors-span` writes the files
// below and replaces their entries in vectors.json and README.md.
var addVectorsSpan = flag.Bool("add-vectors-span", false, "add the source_span vectors to testdata/vectors")

func writeVectorsSpan(t *testing.T) {
	set := newVectorSet(t)
	add := set.add
	src := &vectorSource{}
	src.float("layer.w", []int64{2, 7}, []float32{0.9, -1.1, 0.05, 0.6, -0.2, 1.7, -0.8, 0.3, 0.0, -0.45, 1.2, -1.6, 0.1, 0.55})
	src.kept("layer.b", "F16", []int64{3}, []byte{0x00, 0x3c, 0x00, 0xc0, 0xff, 0x7b})
	ok, want := src.build(t, Base3)
	require.True(t, bytes.Contains(ok, []byte(`"source_span":"`)))
	add(vector{File: "ok-source-span.tkart", Expect: "ok", Version: "1.4", Note: `tensors recorded by their source span identity ("source_span", format 1.4) in place of "source_blake3"`, Tensors: want}, ok)
	p := set.path("ok", ok)
	d := readDraft(t, p)
	span := d.m.Tensors[1].SourceSpan
	d.json = func(b []byte) []byte {
		old := []byte(`"source_span":"` + span + `"`)
		require.True(t, bytes.Contains(b, old))
		return bytes.Replace(b, old, []byte(`"source_blake3":"`+span+`"`), 1)
	}
	add(vector{File: "bad-source-kinds-mixed.tkart", Expect: failManifest, Note: `layer.b records "source_blake3", layer.w "source_span": one kind for all tensors`}, d.encode(t))
	d = readDraft(t, p)
	d.minor, d.m.Minor = 3, nil
	add(vector{File: "bad-source-span-before-14.tkart", Expect: failVersion, Note: `"source_span" (format 1.4) in a file that says version 1.3, without the "minor" key`}, d.encode(t))

	set.publish()
}

// The source span vectors: the good one's entries record source_span and
// no source_blake3 (TestVectors checks every vector's class).
func TestVectorsSpan(t *testing.T) {
	if *addVectorsSpan {
		writeVectorsSpan(t)
	}
	a, err := readFully(filepath.Join(vectorsDir, "ok-source-span.tkart"))
	require.NoError(t, err)
	defer a.Close()
	for _, e := range a.Manifest().Tensors {
		require.Len(t, e.SourceSpan, 64, e.Name)
		require.Empty(t, e.SourceBLAKE3, e.Name)
	}
}
