package convert

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// shardSpec is one shard of a test set: file name, tensors, metadata.
type shardSpec struct {
	name     string
	tensors  []WriteTensor
	metadata map[string]string
}

// writeShards writes each shard with WriteFile into dir.
func writeShards(t *testing.T, dir string, shards []shardSpec) {
	t.Helper()
	for _, s := range shards {
		require.NoError(t, WriteFile(filepath.Join(dir, s.name), s.tensors, s.metadata))
	}
}

// u8 is a one-dimensional U8 tensor holding data.
func u8(name string, data ...byte) WriteTensor {
	return WriteTensor{Name: name, DType: "U8", Shape: []int64{int64(len(data))}, Data: data}
}

// threeShards is a small set in the common naming, model-0000i-of-00003
// (common practice); its index is threeShardIndex.
func threeShards() []shardSpec {
	return []shardSpec{
		{"model-00001-of-00003.safetensors", []WriteTensor{u8("a", 1, 2), u8("b", 3)}, map[string]string{"format": "pt"}},
		{"model-00002-of-00003.safetensors", []WriteTensor{u8("c", 4, 5, 6)}, map[string]string{"format": "pt"}},
		{"model-00003-of-00003.safetensors", []WriteTensor{u8("d", 7)}, map[string]string{"format": "pt"}},
	}
}

const threeShardIndex = `{"metadata":{"total_size":7},"weight_map":{` +
	`"a":"model-00001-of-00003.safetensors","b":"model-00001-of-00003.safetensors",` +
	`"c":"model-00002-of-00003.safetensors","d":"model-00003-of-00003.safetensors"}}`

// A sharded set whose shards github.com/nlpodyssey/safetensors wrote, with
// an index in the common layout ("metadata": {"total_size"}, "weight_map":
// name → shard file; common practice), opens as one model through the
// index and through its directory: every tensor once, with its bytes, and
// a BLAKE3 per shard file.
func TestOpenShardsWrittenByIndependentLibrary(t *testing.T) {
	dir := t.TempDir()
	all := interopTensors()
	weightMap := map[string]string{}
	var total int64
	var shardFiles [][]byte
	for i := range 3 {
		name := fmt.Sprintf("model-%05d-of-00003.safetensors", i+1)
		views := map[string]st.TensorView{}
		for j, tc := range all {
			if j%3 != i {
				continue
			}
			v, err := st.NewTensorView(tc.dtype, u64Shape(tc.shape), tc.data)
			require.NoError(t, err)
			views[tc.name] = v
			weightMap[tc.name] = name
			total += int64(len(tc.data))
		}
		b, err := st.Serialize(views, map[string]string{"format": "pt", "shard": name})
		require.NoError(t, err)
		require.NoError(t, os.WriteFile(filepath.Join(dir, name), b, 0o644))
		shardFiles = append(shardFiles, b)
	}
	index, err := json.Marshal(map[string]any{"metadata": map[string]any{"total_size": total}, "weight_map": weightMap})
	require.NoError(t, err)
	indexPath := filepath.Join(dir, "model"+IndexSuffix)
	require.NoError(t, os.WriteFile(indexPath, index, 0o644))

	for _, open := range []string{indexPath, dir} {
		t.Run(filepath.Base(open), func(t *testing.T) {
			s, err := Open(open)
			require.NoError(t, err)
			defer s.Close()
			assert.Equal(t, indexPath, s.Path)
			assert.Equal(t, []string{`"__metadata__" key "shard" differs between shards; recorded per shard as "shard@SHARD"`}, s.Warnings)
			require.Len(t, s.Files, 3)
			for i, f := range s.Files {
				assert.Equal(t, filepath.Join(dir, fmt.Sprintf("model-%05d-of-00003.safetensors", i+1)), f.Path)
				assert.Equal(t, int64(len(shardFiles[i])), f.Size)
			}
			// Keys equal in every shard are kept; "shard" differs, so it is
			// recorded per shard, with a warning.
			assert.Equal(t, map[string]string{
				"format":                                 "pt",
				"shard@model-00001-of-00003.safetensors": "model-00001-of-00003.safetensors",
				"shard@model-00002-of-00003.safetensors": "model-00002-of-00003.safetensors",
				"shard@model-00003-of-00003.safetensors": "model-00003-of-00003.safetensors",
			}, s.Metadata)
			data, sums := walkAll(t, s)
			require.Len(t, data, len(all))
			for _, tc := range all {
				assert.Equal(t, tc.data, data[tc.name], tc.name)
				assert.Equal(t, blake3.Sum256(tc.data), sums[tc.name], tc.name)
			}
			for i, f := range s.Files {
				assert.Equal(t, blake3.Sum256(shardFiles[i]), f.BLAKE3, f.Path)
			}
			// Tensors come shard by shard.
			seenFile := ""
			for _, tn := range s.Tensors {
				assert.GreaterOrEqual(t, tn.File, seenFile)
				seenFile = tn.File
				assert.Equal(t, weightMap[tn.Name], filepath.Base(tn.File))
			}
		})
	}
}

// Warnings do not stop reading: a total_size that disagrees, differing
// metadata, unknown top-level index keys.
func TestOpenShardsWarnings(t *testing.T) {
	dir := t.TempDir()
	shards := threeShards()
	shards[1].metadata = map[string]string{"format": "np", "extra": "x"}
	writeShards(t, dir, shards)
	index := strings.Replace(threeShardIndex, `"total_size":7`, `"total_size":9,"total_parameters":7`, 1)
	index = strings.Replace(index, `{"metadata"`, `{"writer":{"name":["v",1]},"metadata"`, 1)
	path := filepath.Join(dir, "model"+IndexSuffix)
	require.NoError(t, os.WriteFile(path, []byte(index), 0o644))
	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	assert.Equal(t, map[string]string{
		"extra": "x",
		"format@model-00001-of-00003.safetensors": "pt",
		"format@model-00002-of-00003.safetensors": "np",
		"format@model-00003-of-00003.safetensors": "pt",
	}, s.Metadata)
	require.Len(t, s.Warnings, 3)
	assert.Contains(t, s.Warnings[0], `key "format" differs between shards`)
	assert.Contains(t, s.Warnings[1], path+`: "metadata" total_size 9 differs from the 7 bytes of tensor data in the 3 shards`)
	assert.Contains(t, s.Warnings[2], `ignored top-level keys ["writer"]`)
	data, _ := walkAll(t, s)
	assert.Len(t, data, 4)
}

func TestOpenShardsBadInput(t *testing.T) {
	const s1, s2, s3 = "model-00001-of-00003.safetensors", "model-00002-of-00003.safetensors", "model-00003-of-00003.safetensors"
	type tc struct {
		name     string
		index    string
		edit     func(t *testing.T, dir string) // after the shards are written
		shards   func() []shardSpec
		sentinel error
		file     string // base name of the file the error names
		tensor   string
		marker   string // the offset is the index of marker in the index; "" skips the check
		detail   string
	}
	idx := "model" + IndexSuffix
	replace := func(old, new string) string { return strings.Replace(threeShardIndex, old, new, 1) }
	tests := []tc{
		{name: "missing shard", edit: func(t *testing.T, dir string) { require.NoError(t, os.Remove(filepath.Join(dir, s2))) },
			sentinel: fs.ErrNotExist, file: idx, tensor: "c", marker: `"c"`, detail: `missing shard "` + s2 + `"`},
		{name: "absolute shard path", index: replace(`"d":"`+s3+`"`, `"d":"/etc/`+s3+`"`),
			sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d"`, detail: `shard "/etc/` + s3 + `" leaves the index's directory`},
		{name: "shard path with ..", index: replace(`"d":"`+s3+`"`, `"d":"../`+s3+`"`),
			sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d"`, detail: `shard "../` + s3 + `" leaves`},
		{name: "shard path with .. inside", index: replace(`"d":"`+s3+`"`, `"d":"sub/../../`+s3+`"`),
			sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d"`, detail: "leaves the index's directory"},
		{name: "symbolic link leading out", edit: func(t *testing.T, dir string) {
			outside := filepath.Join(t.TempDir(), s3)
			require.NoError(t, os.Rename(filepath.Join(dir, s3), outside))
			require.NoError(t, os.Symlink(outside, filepath.Join(dir, s3)))
		}, sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d"`, detail: `shard "` + s3 + `" is a symbolic link to`},
		{name: "relative symbolic link leading out", edit: func(t *testing.T, dir string) {
			require.NoError(t, os.Rename(filepath.Join(dir, s3), filepath.Join(dir, "..", "moved-"+s3)))
			require.NoError(t, os.Symlink("../moved-"+s3, filepath.Join(dir, s3)))
		}, sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d"`, detail: "leaves the index's directory"},
		{name: "duplicate tensor across shards", shards: func() []shardSpec {
			s := threeShards()
			s[2].tensors = append(s[2].tensors, u8("a", 9))
			return s
		}, sentinel: ErrIndex, file: s3, tensor: "a", detail: `tensor "a" is also in shard "` + s1 + `"`},
		{name: "tensor not in the weight_map", shards: func() []shardSpec {
			s := threeShards()
			s[1].tensors = append(s[1].tensors, u8("e", 9))
			return s
		}, sentinel: ErrIndex, file: s2, tensor: "e", detail: `tensor "e" is not listed in the index's "weight_map"`},
		{name: "weight_map tensor in no shard", index: replace(`"d":"`+s3+`"`, `"d":"`+s3+`","z":"`+s3+`"`),
			sentinel: ErrIndex, file: idx, tensor: "z", marker: `"z"`, detail: `puts tensor "z" in shard "` + s3 + `", which does not hold it`},
		{name: "weight_map names the wrong shard", index: replace(`"c":"`+s2+`"`, `"c":"`+s3+`","e":"`+s2+`"`),
			shards: func() []shardSpec {
				s := threeShards()
				s[2].tensors = append(s[2].tensors, u8("e", 9))
				return s
			}, sentinel: ErrIndex, file: idx, tensor: "c", marker: `"c"`, detail: `puts tensor "c" in shard "` + s3 + `", but shard "` + s2 + `" holds it`},
		{name: "weight_map tensor listed twice", index: replace(`"d":"`+s3+`"`, `"d":"`+s3+`","d":"`+s3+`"`),
			sentinel: ErrIndex, file: idx, tensor: "d", marker: `"d":"` + s3 + `"}`, detail: `duplicate key "d" in "weight_map"`},
		{name: "index not an object", index: `[1]`, sentinel: ErrIndex, file: idx, marker: `[1]`, detail: "index must be an object"},
		{name: "index not UTF-8", index: "{\"weight_map\":{\"a\xff\":\"x\"}}", sentinel: ErrIndex, file: idx, marker: "\xff", detail: "not valid UTF-8"},
		{name: "index malformed", index: `{"weight_map":{"a":}}`, sentinel: ErrIndex, file: idx, tensor: "a", marker: `}}`, detail: "malformed JSON"},
		{name: "index with trailing data", index: threeShardIndex + ` x`, sentinel: ErrIndex, file: idx, marker: `x`, detail: "after the index object"},
		{name: "no weight_map", index: `{"metadata":{}}`, sentinel: ErrIndex, file: idx, detail: `index has no "weight_map"`},
		{name: "empty weight_map", index: `{"weight_map":{}}`, sentinel: ErrIndex, file: idx, detail: "lists no tensor"},
		{name: "weight_map not an object", index: `{"weight_map":["a"]}`, sentinel: ErrIndex, file: idx, marker: `["a"]`, detail: `"weight_map" must be an object`},
		{name: "shard not a string", index: replace(`"d":"`+s3+`"`, `"d":3`), sentinel: ErrIndex, file: idx, tensor: "d", marker: `3}`, detail: "must be a non-empty string, found number 3"},
		{name: "empty shard name", index: replace(`"d":"`+s3+`"`, `"d":""`), sentinel: ErrIndex, file: idx, tensor: "d", marker: `""`, detail: "non-empty string"},
		{name: "duplicate top-level key", index: replace(`{"metadata":{"total_size":7},`, `{"metadata":{},"metadata":{},`), sentinel: ErrIndex, file: idx, marker: `"metadata":{},"w`, detail: `duplicate key "metadata" in the index`},
		{name: "negative total_size", index: replace(`"total_size":7`, `"total_size":-7`), sentinel: ErrIndex, file: idx, marker: `-7`, detail: "total_size -7 is negative"},
		{name: "fractional total_size", index: replace(`"total_size":7`, `"total_size":7.5`), sentinel: ErrIndex, file: idx, marker: `7.5`, detail: "not an integer"},
		{name: "bad shard header", edit: func(t *testing.T, dir string) {
			require.NoError(t, os.WriteFile(filepath.Join(dir, s2), stFile(`{"c":{"dtype":"U8","shape":[3],"data_offsets":[0,3]}}`, []byte{1, 2}), 0o644))
		}, sentinel: ErrTruncated, file: s2, tensor: "c", detail: "run past the end"},
		{name: "shard is a directory", edit: func(t *testing.T, dir string) {
			require.NoError(t, os.Remove(filepath.Join(dir, s2)))
			require.NoError(t, os.Mkdir(filepath.Join(dir, s2), 0o755))
		}, sentinel: ErrIndex, file: idx, tensor: "c", detail: `shard "model-00002-of-00003.safetensors": not a regular file (a directory)`},
	}
	for _, c := range tests {
		t.Run(c.name, func(t *testing.T) {
			dir := filepath.Join(t.TempDir(), "set")
			require.NoError(t, os.Mkdir(dir, 0o755))
			shards := threeShards()
			if c.shards != nil {
				shards = c.shards()
			}
			writeShards(t, dir, shards)
			index := threeShardIndex
			if c.index != "" {
				index = c.index
			}
			path := filepath.Join(dir, idx)
			require.NoError(t, os.WriteFile(path, []byte(index), 0o644))
			if c.edit != nil {
				c.edit(t, dir)
			}
			for _, open := range []string{path, dir} {
				ie := openFailure(t, open, c.sentinel, filepath.Join(dir, c.file), c.tensor)
				if c.marker != "" {
					assert.Equal(t, int64(strings.LastIndex(index, c.marker)), ie.Offset, "offset of %q", c.marker)
				}
				assert.Contains(t, ie.Error(), c.detail)
			}
		})
	}
}

// An index larger than the header cap (100,000,000 bytes, the format
// description's cap) is refused before it is read; the file here is sparse.
func TestOpenIndexOverCap(t *testing.T) {
	path := filepath.Join(t.TempDir(), "big.json")
	f, err := os.Create(path)
	require.NoError(t, err)
	require.NoError(t, f.Truncate(100_000_001))
	require.NoError(t, f.Close())
	_, err = Open(path)
	assert.ErrorIs(t, err, ErrIndex)
	assert.Contains(t, err.Error(), "index is 100000001 bytes, over the cap of 100000000")
}

// A shard reached through a symbolic link that stays inside the index's
// directory, or in a subdirectory, is read.
func TestOpenShardsInsideLinks(t *testing.T) {
	dir := t.TempDir()
	require.NoError(t, os.Mkdir(filepath.Join(dir, "sub"), 0o755))
	require.NoError(t, WriteFile(filepath.Join(dir, "sub", "real.safetensors"), []WriteTensor{u8("a", 1)}, nil))
	require.NoError(t, os.Symlink("sub/real.safetensors", filepath.Join(dir, "link.safetensors")))
	require.NoError(t, WriteFile(filepath.Join(dir, "sub", "b.safetensors"), []WriteTensor{u8("b", 2)}, nil))
	path := filepath.Join(dir, "set.json")
	require.NoError(t, os.WriteFile(path, []byte(`{"weight_map":{"a":"link.safetensors","b":"sub/b.safetensors"}}`), 0o644))
	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	data, _ := walkAll(t, s)
	assert.Equal(t, map[string][]byte{"a": {1}, "b": {2}}, data)
	assert.Nil(t, s.Metadata)
}

func TestOpenDirectory(t *testing.T) {
	tests := []struct {
		name     string
		files    []string // written as one-tensor safetensors files; *.json as the three-shard index
		want     string   // file opened, "" for an error
		sentinel error
	}{
		{"one file", []string{"only.safetensors", "notes.txt"}, "only.safetensors", nil},
		{"index wins over files", []string{"model" + IndexSuffix, "extra.safetensors"}, "model" + IndexSuffix, nil},
		{"two files, no index", []string{"a.safetensors", "b.safetensors"}, "", ErrIndex},
		{"two indexes", []string{"a" + IndexSuffix, "b" + IndexSuffix}, "", ErrIndex},
		{"nothing", []string{"notes.txt"}, "", fs.ErrNotExist},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			for _, name := range tc.files {
				path := filepath.Join(dir, name)
				switch {
				case strings.HasSuffix(name, ".json"):
					writeShards(t, dir, threeShards())
					require.NoError(t, os.WriteFile(path, []byte(threeShardIndex), 0o644))
				case strings.HasSuffix(name, ".safetensors"):
					require.NoError(t, WriteFile(path, []WriteTensor{u8("x", 1)}, nil))
				default:
					require.NoError(t, os.WriteFile(path, []byte("x"), 0o644))
				}
			}
			s, err := Open(dir)
			if tc.sentinel != nil {
				require.ErrorIs(t, err, tc.sentinel)
				var ie *InputError
				require.True(t, errors.As(err, &ie))
				assert.Equal(t, dir, ie.File)
				return
			}
			require.NoError(t, err)
			defer s.Close()
			assert.Equal(t, filepath.Join(dir, tc.want), s.Path)
		})
	}
}

// FuzzParseIndex feeds arbitrary bytes to the index parser: never a panic;
// errors are *InputError values wrapping ErrIndex; a parsed index lists
// unique tensors with non-empty shard names.
func FuzzParseIndex(f *testing.F) {
	f.Add([]byte(threeShardIndex))
	f.Add([]byte(`{"weight_map":{"a":"x.safetensors"},"other":[1,{"b":null}]}`))
	f.Add([]byte(`{"metadata":{"total_size":-1},"weight_map":{}}`))
	f.Add([]byte(`{"weight_map":{"a":"x","a":"y"}}`))
	f.Add([]byte("{\"weight_map\":{\"\xff\":1}}"))
	f.Add([]byte(`[]`))
	f.Fuzz(func(t *testing.T, b []byte) {
		idx, err := parseIndex("i.json", b)
		if err != nil {
			var ie *InputError
			if !errors.As(err, &ie) || ie.File != "i.json" || !errors.Is(err, ErrIndex) {
				t.Fatalf("error is not an *InputError wrapping ErrIndex: %v", err)
			}
			if ie.Offset < -1 || ie.Offset > int64(len(b)) {
				t.Fatalf("offset %d outside the %d-byte index", ie.Offset, len(b))
			}
			return
		}
		seen := map[string]bool{}
		for _, e := range idx.entries {
			if seen[e.tensor] || e.shard == "" {
				t.Fatalf("entry %+v repeated or without a shard", e)
			}
			seen[e.tensor] = true
		}
		if len(idx.entries) == 0 || idx.totalSize < -1 {
			t.Fatalf("parsed index %+v", idx)
		}
	})
}
