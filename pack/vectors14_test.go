package pack

import (
	"bytes"
	"encoding/json"
	"flag"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

// The vectors of format 1.4 are added to testdata/vectors without writing
// the older ones anew (their bytes stay as they were published):
// `go test ./pack -run TestVectors14 -add-vectors-14` writes the files
// below and replaces their entries in vectors.json and README.md.
var addVectors14 = flag.Bool("add-vectors-14", false, "add the format 1.4 vectors to testdata/vectors")

const pieceVectorNote = "a companion section of 8393608 bytes (2^23 + 5000): three piece chaining values, the last piece 5000 bytes"

// vectorSet gathers vectors written beside the published ones.
type vectorSet struct {
	t     *testing.T
	dir   string
	vs    []vector
	files map[string][]byte
}

func newVectorSet(t *testing.T) *vectorSet {
	return &vectorSet{t: t, dir: t.TempDir(), files: map[string][]byte{}}
}

// add records vector v, whose file holds b.
func (s *vectorSet) add(v vector, b []byte) {
	s.vs = append(s.vs, v)
	s.files[v.File] = b
}

// path writes b to a scratch file and returns its path.
func (s *vectorSet) path(name string, b []byte) string {
	p := filepath.Join(s.dir, name)
	require.NoError(s.t, os.WriteFile(p, b, 0o644))
	return p
}

// redo adds a vector made by f from the artifact at from.
func (s *vectorSet) redo(file, expect, note, from string, f func(d *draft)) {
	d := readDraft(s.t, from)
	f(d)
	s.add(vector{File: file, Expect: expect, Note: note}, d.encode(s.t))
}

// inject adds a vector whose manifest has old replaced by new.
func (s *vectorSet) inject(file, expect, note, from, old, new string) {
	s.redo(file, expect, note, from, func(d *draft) {
		d.json = func(b []byte) []byte {
			require.True(s.t, bytes.Contains(b, []byte(old)), "%s: %s not in the manifest", file, old)
			return bytes.Replace(b, []byte(old), []byte(new), 1)
		}
	})
}

// publish writes the set's files and entries (publishVectors).
func (s *vectorSet) publish() { publishVectors(s.t, s.vs, s.files) }

func writeVectors14(t *testing.T) {
	set := newVectorSet(t)
	add, path, redo, inject := set.add, set.path, set.redo, set.inject

	// A small artifact as every writer of 1.4 writes it.
	small := &vectorSource{}
	small.float("layer.w", []int64{2, 7}, []float32{0.9, -1.1, 0.05, 0.6, -0.2, 1.7, -0.8, 0.3, 0.0, -0.45, 1.2, -1.6, 0.1, 0.55})
	small.kept("layer.b", "F16", []int64{3}, []byte{0x00, 0x3c, 0x00, 0xc0, 0xff, 0x7b})
	okSmall, wantSmall := small.build(t, Bits2)
	add(vector{File: "ok-minor-key.tkart", Expect: "ok", Version: "1.4", Note: `written by a writer of 1.4: preamble minor version 4 and the manifest's "minor": 4, features of 1.0 only`, Tensors: wantSmall}, okSmall)
	smallPath := path("small", okSmall)
	inject("bad-minor-key-missing.tkart", failManifest, `preamble minor version 4, the manifest without its "minor" key`, smallPath, `"minor":4,`, ``)
	redo("bad-minor-key-before-14.tkart", failVersion, `the manifest's "minor" key (format 1.4) in a file that says version 1.3`, smallPath, func(d *draft) { d.minor = 3 })
	inject("bad-minor-key-value.tkart", failManifest, `"minor": 3 in a file that says version 1.4`, smallPath, `"minor":4,`, `"minor":3,`)

	// A section over 2^22 bytes in three pieces, the last one short: a
	// companion of a 256-byte pattern (compressible, small in git).
	bigData := make([]byte, 2*manifest.ChunkSize+5000)
	for i := range bigData {
		bigData[i] = byte(i * 13)
	}
	bigSrc := &vectorSource{recipe: convert.DefaultRecipe(), companions: []vectorFile{{"vocab.txt", bigData}}}
	okBig, _ := bigSrc.build(t, Base3)
	add(vector{File: "ok-piece-cvs.tkart", Expect: "ok", Version: "1.4", Note: pieceVectorNote, Companions: bigSrc.wantCompanions()}, okBig)
	bigPath := path("big", okBig)
	sec := readDraft(t, bigPath).m.Companions[0].Section
	require.Len(t, sec.PieceCVs, 3)
	cvs := sec.PieceCVs
	inject("bad-piece-cv.tkart", failSectionHash, "vocab.txt: piece chaining value 1 replaced by that of piece 0 (the section's own BLAKE3 holds)", bigPath,
		`"`+cvs[1]+`"`, `"`+cvs[0]+`"`)
	flipped := bytes.Clone(okBig)
	flipped[sec.Offset+2*manifest.ChunkSize+100] ^= 0x20
	add(vector{File: "bad-piece-byte.tkart", Expect: failSectionHash, Note: "vocab.txt: a byte of piece 2 changed, no hash updated (piece 2's chaining value and the section's BLAKE3 differ)"}, flipped)
	inject("bad-piece-cv-count.tkart", failManifest, "vocab.txt: two piece chaining values for three pieces", bigPath,
		`,"`+cvs[2]+`"]`, `]`)
	inject("bad-chunks-in-14.tkart", failManifest, "vocab.txt: the chunk hashes of 1.0–1.3 (correct ones) in place of its piece chaining values, in a file that says 1.4", bigPath,
		`"piece_cvs":["`+strings.Join(cvs, `","`)+`"]`, `"chunks":["`+strings.Join(chunkHashes(bigData), `","`)+`"]`)
	redo("bad-piece-cvs-before-14.tkart", failVersion, `piece chaining values (format 1.4) in a file that says version 1.3, without the "minor" key`, bigPath, func(d *draft) {
		d.minor = 3
		d.m.Minor = nil
		d.json = func(b []byte) []byte {
			// encode writes chunk hashes for 1.3: put the chaining values back
			return bytes.Replace(b, []byte(`"chunks":["`+strings.Join(chunkHashes(bigData), `","`)+`"]`), []byte(`"piece_cvs":["`+strings.Join(cvs, `","`)+`"]`), 1)
		}
	})

	// gamma summed in blocks of sixteen strided partial sums (format 1.4);
	// a tensor of at most 2^20 elements has the trits of strided16
	blk := &vectorSource{recipe: blockedRecipe()}
	blk.float("blocked.w", []int64{4, 10}, testweights.Gaussian(newTestRand(35), 40))
	okBlocked, wantBlocked := blk.build(t, Base3)
	add(vector{File: "ok-blocked16.tkart", Expect: "ok", Version: "1.4", Note: `recipe with "sum": "blocked16" (gamma summed in blocks of 2^20 elements, each in 16 strided partial sums), so format 1.4`, Tensors: wantBlocked}, okBlocked)
	blockedPath := path("blocked", okBlocked)
	redo("bad-minor-for-blocked16.tkart", failVersion, `the recipe's "sum": "blocked16" (format 1.4) in a file that says version 1.3`, blockedPath, func(d *draft) {
		d.minor = 3
		d.m.Minor = nil
	})

	set.publish()
}

// publishVectors writes files into testdata/vectors and puts vs in the
// published list in place of their earlier entries, the others untouched.
func publishVectors(t *testing.T, vs []vector, files map[string][]byte) {
	b, err := os.ReadFile(filepath.Join(vectorsDir, "vectors.json"))
	require.NoError(t, err)
	var all []vector
	require.NoError(t, json.Unmarshal(b, &all))
	all = slices.DeleteFunc(all, func(v vector) bool { _, ok := files[v.File]; return ok })
	all = append(all, vs...)
	for name, b := range files {
		require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, name), b, 0o644))
	}
	js, err := json.MarshalIndent(all, "", "  ")
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, "vectors.json"), append(js, '\n'), 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(vectorsDir, "README.md"), []byte(vectorsReadme(all)), 0o644))
}

// The vectors of 1.4 beyond their class (TestVectors checks that): the Go
// reader names the bad piece, and the good one's pieces join into the
// plain BLAKE3 of the section.
func TestVectors14(t *testing.T) {
	if *addVectors14 {
		writeVectors14(t)
	}
	for file, want := range map[string]string{
		"bad-piece-cv.tkart":   "piece 1 (bytes 4194304..8388608 of the section)",
		"bad-piece-byte.tkart": "piece 2 (bytes 8388608..8393608 of the section)",
	} {
		_, err := readFully(filepath.Join(vectorsDir, file))
		require.ErrorIs(t, err, ErrHash, file)
		require.ErrorContains(t, err, want, file)
	}
	a, err := readFully(filepath.Join(vectorsDir, "ok-piece-cvs.tkart"))
	require.NoError(t, err)
	defer a.Close()
	c := a.Companions()[0]
	data, err := a.Companion(c.Name)
	require.NoError(t, err)
	require.Equal(t, sectionOf(data, 1), manifest.Section{Length: c.Section.Length, BLAKE3: c.Section.BLAKE3, PieceCVs: c.Section.PieceCVs})
}
