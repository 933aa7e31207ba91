package main

import (
	"bytes"
	"encoding/binary"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/pack"
)

var updateMalformed = flag.Bool("update-malformed", false, "regenerate testdata/malformed from malformedCases")

// malformedDir holds the malformed-input corpus, shared with the fuzz seeds.
const malformedDir = "../../testdata/malformed"

// malformedCase is one file (or sharded-set directory) of the corpus and
// the error ternkit must give for it. Checkpoints are packed, artifacts
// verified.
type malformedCase struct {
	name     string // under testdata/malformed; a directory for a sharded set
	about    string // what is wrong, for the README table
	code     int    // exitInput or exitFailed
	fragment string // in stderr (exit 2) or stdout (exit 1)
	files    func(good []byte) map[string][]byte
}

// stBytes lays out a safetensors file: an 8-byte little-endian header
// length, the header padded with spaces to a multiple of 8, then data (the
// safetensors format description).
func stBytes(header string, data []byte) []byte {
	header += strings.Repeat(" ", (8-len(header)%8)%8)
	return stRaw(uint64(len(header)), header, data)
}

// stRaw lays out a safetensors file with an arbitrary length field.
func stRaw(n uint64, header string, data []byte) []byte {
	return append(append(binary.LittleEndian.AppendUint64(nil, n), header...), data...)
}

// one returns a file set of one file.
func one(name string, b []byte) func([]byte) map[string][]byte {
	return func([]byte) map[string][]byte { return map[string][]byte{name: b} }
}

// sharded returns a sharded set: an index and the shards, named in the
// common layout (model.safetensors.index.json, model-0000i-of-0000n;
// common practice).
func sharded(index string, shards ...[]byte) func([]byte) map[string][]byte {
	return func([]byte) map[string][]byte {
		m := map[string][]byte{"model.safetensors.index.json": []byte(index)}
		for i, s := range shards {
			m[fmt.Sprintf("model-%05d-of-%05d.safetensors", i+1, len(shards))] = s
		}
		return m
	}
}

// edited returns the good artifact with edit applied to a copy.
func edited(edit func(b []byte) []byte) func([]byte) map[string][]byte {
	return func(good []byte) map[string][]byte {
		return map[string][]byte{"": edit(bytes.Clone(good))}
	}
}

const (
	f32Pair = `{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]}}`
	u8One   = `{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]}}`
)

func malformedCases() []malformedCase {
	eight := make([]byte, 8)
	nan := binary.LittleEndian.AppendUint32(binary.LittleEndian.AppendUint32(nil, math.Float32bits(1)), 0x7fc00000)
	shardA := stBytes(`{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]}}`, []byte{1})
	shardB := stBytes(`{"b":{"dtype":"U8","shape":[1],"data_offsets":[0,1]}}`, []byte{2})
	twoShards := `{"weight_map":{"a":"model-00001-of-00002.safetensors","b":"model-00002-of-00002.safetensors"}}`
	return append([]malformedCase{
		{"empty.safetensors", "zero bytes", exitInput, "shorter than the 8-byte header length", one("", nil)},
		{"short-length.safetensors", "three bytes, no full length field", exitInput, "shorter than the 8-byte header length", one("", []byte{1, 2, 3})},
		{"header-over-cap.safetensors", "header length 100,000,001, over the cap", exitInput, "exceeds the cap of 100000000 bytes", one("", stRaw(100_000_001, "{}", nil))},
		{"header-past-end.safetensors", "header length past the end of the file", exitInput, "header length 4096 exceeds the", one("", stRaw(4096, "{}      ", nil))},
		{"not-json.safetensors", "header is not JSON", exitInput, "malformed JSON", one("", stBytes("hello", nil))},
		{"not-utf8.safetensors", "header is not UTF-8", exitInput, "not valid UTF-8", one("", stBytes("{\"\xff\":1}", nil))},
		{"header-array.safetensors", "header is a JSON array", exitInput, "header must be a JSON object", one("", stBytes("[]", nil))},
		{"duplicate-tensor.safetensors", "a tensor named twice", exitInput, `duplicate key "w"`, one("", stBytes(`{"w":{"dtype":"U8","shape":[1],"data_offsets":[0,1]},"w":{"dtype":"U8","shape":[1],"data_offsets":[1,2]}}`, []byte{1, 2}))},
		{"dtype-number.safetensors", "dtype is a number", exitInput, "dtype must be a string", one("", stBytes(`{"w":{"dtype":5,"shape":[2],"data_offsets":[0,8]}}`, eight))},
		{"negative-shape.safetensors", "a negative dimension", exitInput, "-1", one("", stBytes(`{"w":{"dtype":"F32","shape":[-1],"data_offsets":[0,8]}}`, eight))},
		{"shape-overflow.safetensors", "product(shape) × size overflows int64", exitInput, "overflow", one("", stBytes(`{"w":{"dtype":"F32","shape":[4294967296,4294967296],"data_offsets":[0,8]}}`, eight))},
		{"size-mismatch.safetensors", "offsets span 4 bytes, shape needs 8", exitInput, "data_offsets", one("", stBytes(`{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,4]}}`, make([]byte, 4)))},
		{"hole.safetensors", "a gap between two tensors", exitInput, "leave a hole", one("", stBytes(`{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]},"b":{"dtype":"U8","shape":[1],"data_offsets":[2,3]}}`, []byte{1, 0, 2}))},
		{"overlap.safetensors", "two tensors share bytes", exitInput, "overlap", one("", stBytes(`{"a":{"dtype":"U8","shape":[2],"data_offsets":[0,2]},"b":{"dtype":"U8","shape":[2],"data_offsets":[1,3]}}`, []byte{1, 2, 3}))},
		{"truncated-data.safetensors", "data section shorter than the offsets", exitInput, "truncated", one("", stBytes(f32Pair, make([]byte, 5)))},
		{"trailing-bytes.safetensors", "bytes after the last tensor", exitInput, "trailing", one("", stBytes(u8One, []byte{1, 2}))},
		{"metadata-not-string.safetensors", `"__metadata__" value is a number`, exitInput, "must be a string", one("", stBytes(`{"__metadata__":{"k":1},"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]}}`, []byte{1}))},
		{"extra-field.safetensors", "a tensor entry with an unknown field", exitInput, `"extra"`, one("", stBytes(`{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1],"extra":1}}`, []byte{1}))},
		{"data-after-header.safetensors", "JSON text after the header object", exitInput, "after the header object", one("", stBytes(u8One+`{}`, []byte{1}))},
		{"missing-offsets.safetensors", `a tensor entry without "data_offsets"`, exitInput, `"data_offsets"`, one("", stBytes(`{"a":{"dtype":"U8","shape":[1]}}`, []byte{1}))},
		{"nan-weight.safetensors", "an F32 weight that is NaN", exitInput, "element 1 is NaN", one("", stBytes(`{"blocks.0.mlp.up.weight":{"dtype":"F32","shape":[1,2],"data_offsets":[0,8]}}`, nan))},
		{"index-not-json", "index is not JSON", exitInput, "malformed JSON", sharded(`{"weight_map":`, shardA)},
		{"index-no-weight-map", `index without "weight_map"`, exitInput, `index has no "weight_map"`, sharded(`{"metadata":{}}`, shardA)},
		{"index-escapes-dir", "a shard name leading out of the directory", exitInput, "../outside.safetensors", sharded(`{"weight_map":{"a":"../outside.safetensors"}}`)},
		{"index-missing-shard", "the index names a shard that is absent", exitInput, `missing shard "model-00001-of-00002.safetensors"`, sharded(twoShards, shardA)},
		{"index-wrong-shard", "weight_map puts a tensor in the wrong shard", exitInput, `"b"`, sharded(strings.Replace(twoShards, `"b":"model-00002`, `"b":"model-00001`, 1), shardA, shardB)},
		{"index-duplicate-tensor", "two shards hold the same tensor", exitInput, `"a"`, sharded(twoShards, shardA, stBytes(`{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]},"b":{"dtype":"U8","shape":[1],"data_offsets":[1,2]}}`, []byte{1, 2}))},
		{"artifact-empty.tkart", "zero bytes", exitFailed, "shorter than preamble and trailer", edited(func([]byte) []byte { return nil })},
		{"artifact-bad-magic.tkart", "first byte changed: not an artifact, an input error", exitInput, "not a ternkit artifact", edited(func(b []byte) []byte { b[0] ^= 0xff; return b })},
		{"artifact-major-version.tkart", "major version 9", exitFailed, "major version 9", edited(func(b []byte) []byte { b[8] = 9; return b })},
		{"artifact-truncated.tkart", "last byte cut off", exitFailed, "trailer", edited(func(b []byte) []byte { return b[:len(b)-1] })},
		{"artifact-trailer-length.tkart", "trailer's manifest length off by one", exitFailed, "manifest length", edited(func(b []byte) []byte {
			at := len(b) - pack.TrailerLen + 8
			binary.LittleEndian.PutUint64(b[at:], binary.LittleEndian.Uint64(b[at:])+1)
			return b
		})},
		{"artifact-manifest-byte.tkart", "a manifest byte flipped", exitFailed, "hash mismatch", edited(func(b []byte) []byte { b[len(b)-pack.TrailerLen-2] ^= 1; return b })},
		{"artifact-section-byte.tkart", "a byte of the first section flipped", exitFailed, "BLAKE3", edited(func(b []byte) []byte { b[pack.PreambleLen] ^= 1; return b })},
	}, hostileCases()...)
}

// goodArtifact packs a small checkpoint with fixed values and no creation
// time, so that its bytes are the same on every run.
func goodArtifact(t *testing.T) []byte {
	t.Helper()
	dir := t.TempDir()
	w := make([]byte, 0, 4*64)
	for i := range 64 {
		w = binary.LittleEndian.AppendUint32(w, math.Float32bits(float32(i%9)-4.25))
	}
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{8, 8}, Data: w},
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{8}, Data: w[:32]},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "good"+pack.Extension)
	r := convert.DefaultRecipe()
	r.Sum = convert.SumStrided16 // the order the corpus was written with
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Bits2, Recipe: r, Tool: "ternkit malformed corpus"})
	require.NoError(t, err)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	return b
}

// The committed corpus is what malformedCases generates: regenerate it
// with -update-malformed after a format change and read the diff.
func TestMalformedCorpusUpToDate(t *testing.T) {
	good := goodArtifact(t)
	want := map[string][]byte{"README.md": malformedReadme()}
	for _, c := range malformedCases() {
		for name, b := range c.files(good) {
			want[filepath.Join(c.name, name)] = b
		}
	}
	if *updateMalformed {
		require.NoError(t, os.RemoveAll(malformedDir))
		for name, b := range want {
			p := filepath.Join(malformedDir, name)
			require.NoError(t, os.MkdirAll(filepath.Dir(p), 0o755))
			require.NoError(t, os.WriteFile(p, b, 0o644))
		}
	}
	var got []string
	require.NoError(t, filepath.WalkDir(malformedDir, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(malformedDir, p)
		got = append(got, rel)
		b, err := os.ReadFile(p)
		require.NoError(t, err)
		require.True(t, bytes.Equal(want[rel], b), "%s differs from its generator; run go test ./cmd/ternkit -run Malformed -update-malformed", rel)
		return nil
	}))
	wantNames := make([]string, 0, len(want))
	for name := range want {
		wantNames = append(wantNames, name)
	}
	slices.Sort(wantNames)
	require.Equal(t, wantNames, got, "run go test ./cmd/ternkit -run Malformed -update-malformed")
}

// malformedReadme is the corpus's README: the table of expected errors.
func malformedReadme() []byte {
	var b strings.Builder
	b.WriteString("# Malformed inputs\n\n" +
		"Each entry must be refused with the exit code and a message containing the\n" +
		"fragment below (`TestMalformedCorpus` in cmd/ternkit runs the CLI on each).\n" +
		"Checkpoints (`.safetensors` files, sharded-set directories) are given to\n" +
		"`ternkit pack`, artifacts to `ternkit verify`. Exit 2 is an input error,\n" +
		"exit 1 a failed verification. Generated by `malformedCases` in\n" +
		"cmd/ternkit/malformed_test.go: `go test ./cmd/ternkit -run Malformed -update-malformed`.\n\n" +
		"The `artifact-entropy-*` and `artifact-deep-json` entries are hostile: small files that\n" +
		"claim billions of trits or nest without end. Each must be refused without memory or\n" +
		"time following its claims: the manifest rules refuse a frame too short for its claimed\n" +
		"content and nesting past 64 levels before anything is allocated, and RLE frames at the\n" +
		"length bound decode to at most 32768 times their bytes.\n\n" +
		"| entry | what is wrong | exit | message contains |\n|---|---|---|---|\n")
	for _, c := range malformedCases() {
		fmt.Fprintf(&b, "| `%s` | %s | %d | `%s` |\n", c.name, strings.ReplaceAll(c.about, "|", `\|`), c.code, c.fragment)
	}
	return []byte(b.String())
}

// Every corpus entry gives its exit code and message, and packing one
// leaves nothing at the destination.
func TestMalformedCorpus(t *testing.T) {
	for _, c := range malformedCases() {
		t.Run(c.name, func(t *testing.T) {
			in := filepath.Join(malformedDir, c.name)
			out := filepath.Join(t.TempDir(), "out"+pack.Extension)
			args := []string{"pack", in, "-o", out, "--quiet"}
			if strings.HasSuffix(c.name, pack.Extension) {
				args = []string{"verify", in, "--quiet"}
			}
			code, stdout, stderr := ternkit(args...)
			require.Equal(t, c.code, code, "stdout:\n%s\nstderr:\n%s", stdout, stderr)
			require.Empty(t, stdout, "--quiet: a failure is reported on stderr")
			msg := stderr
			require.Contains(t, msg, c.fragment)
			require.Contains(t, msg, c.name, "the message names the file")
			require.Contains(t, msg, "byte ", "the message gives the byte offset")
			require.NoFileExists(t, out)
			entries, err := os.ReadDir(filepath.Dir(out))
			require.NoError(t, err)
			require.Empty(t, entries, "no temporary file is left")
		})
	}
}
