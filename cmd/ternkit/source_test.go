package main

import (
	"encoding/binary"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/pack"
)

const shardIndexName = "model" + convert.IndexSuffix

// writeShardedModel writes a small transformer-shaped BF16 model as a
// three-shard set with an index in the common layout (common practice:
// model-0000i-of-00003.safetensors, "metadata": {"total_size"},
// "weight_map") and returns the index's bytes.
func writeShardedModel(t *testing.T, dir string) []byte {
	t.Helper()
	rng := rand.New(rand.NewPCG(7, 3))
	gauss := func(n int) []byte {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(0.02 * rng.NormFloat64())
		}
		b, err := convert.EncodeFloat32(nil, "BF16", v)
		require.NoError(t, err)
		return b
	}
	const width, layers = 32, 3
	weightMap := map[string]string{}
	var total int64
	for shard := range 3 {
		name := fmt.Sprintf("model-%05d-of-00003.safetensors", shard+1)
		var tensors []convert.WriteTensor
		add := func(tensor string, shape ...int64) {
			n := int(shape[0])
			if len(shape) == 2 {
				n *= int(shape[1])
			}
			tensors = append(tensors, convert.WriteTensor{Name: tensor, DType: "BF16", Shape: shape, Data: gauss(n)})
			weightMap[tensor] = name
			total += int64(2 * n)
		}
		if shard == 0 {
			add("embed.tokens.weight", 64, width)
		}
		p := fmt.Sprintf("blocks.%d.", shard)
		add(p+"attn_norm.weight", width)
		for _, proj := range []string{"q", "k", "v", "o"} {
			add(p+"attn."+proj+".weight", width, width)
		}
		add(p+"mlp.up.weight", 2*width, width)
		add(p+"mlp.down.weight", width, 2*width)
		if shard == layers-1 {
			add("lm_head.weight", 64, width)
		}
		require.NoError(t, convert.WriteFile(filepath.Join(dir, name), tensors, map[string]string{"format": "pt"}))
	}
	index, err := json.Marshal(map[string]any{"metadata": map[string]any{"total_size": total}, "weight_map": weightMap})
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(dir, shardIndexName), index, 0o644))
	return index
}

// A three-shard set packs from its directory and from its index, and
// verifies against either; the manifest records every shard and the shards'
// metadata. A changed byte in a shard fails verification.
func TestPackShardedSet(t *testing.T) {
	dir := t.TempDir()
	set := filepath.Join(dir, "set")
	require.NoError(t, os.Mkdir(set, 0o755))
	writeShardedModel(t, set)

	art := filepath.Join(dir, "set.tkart")
	code, out, errOut := ternkit("pack", set, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "23 tensors (18 ternary, 0 int8, 5 kept)")
	require.NotContains(t, errOut, "warning")
	index := filepath.Join(set, shardIndexName)
	for _, against := range []string{set, index} {
		code, out, errOut = ternkit("verify", art, "--against", against)
		require.Equal(t, exitOK, code, out+errOut)
	}

	again := filepath.Join(dir, "again.tkart")
	code, _, errOut = ternkit("pack", index, "-o", again)
	require.Equal(t, exitOK, code, errOut)
	a1, err := os.ReadFile(art)
	require.NoError(t, err)
	a2, err := os.ReadFile(again)
	require.NoError(t, err)
	require.Equal(t, a1, a2, "the directory and its index are the same source")

	a, err := pack.Open(art)
	require.NoError(t, err)
	m := a.Manifest()
	var names []string
	for _, f := range m.Source.Files {
		names = append(names, f.Name)
	}
	a.Close()
	require.Equal(t, []string{"model-00001-of-00003.safetensors", "model-00002-of-00003.safetensors", "model-00003-of-00003.safetensors"}, names)
	require.Equal(t, map[string]string{"format": "pt"}, m.Source.Metadata)

	// Flip a byte in the last tensor of the second shard.
	shard := filepath.Join(set, "model-00002-of-00003.safetensors")
	b, err := os.ReadFile(shard)
	require.NoError(t, err)
	b[len(b)-3] ^= 0x10
	require.NoError(t, os.WriteFile(shard, b, 0o644))
	code, out, _ = ternkit("verify", art, "--against", set)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, "blocks.1.mlp.down.weight")
}

// An index total_size that disagrees with the shards is a warning on
// stderr, not an error.
func TestPackShardedSetTotalSizeWarning(t *testing.T) {
	dir := t.TempDir()
	index := writeShardedModel(t, dir)
	var doc map[string]any
	require.NoError(t, json.Unmarshal(index, &doc))
	doc["metadata"] = map[string]any{"total_size": 12345}
	index, err := json.Marshal(doc)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(dir, shardIndexName), index, 0o644))
	code, out, errOut := ternkit("pack", dir, "-o", filepath.Join(t.TempDir(), "w.tkart"))
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "packed")
	require.Contains(t, errOut, "ternkit: warning: "+filepath.Join(dir, shardIndexName)+`: "metadata" total_size 12345 differs`)
}

// Every malformed input of the reading issue is refused with exit 2 and a
// message naming the file, the tensor where there is one, and the byte
// offset; nothing is written beside the source or at the destination.
func TestPackMalformedSources(t *testing.T) {
	const entry = `{"w":{"dtype":"F32","shape":[2,2],"data_offsets":[0,16]}}`
	file := func(header string, data []byte) []byte {
		b := binary.LittleEndian.AppendUint64(nil, uint64(len(header)))
		return append(append(b, header...), data...)
	}
	withLength := func(n uint64) []byte {
		b := file(entry, make([]byte, 16))
		binary.LittleEndian.PutUint64(b, n)
		return b
	}
	// single is a one-file source; shards edits a valid three-shard set.
	type source struct {
		single []byte
		shards func(t *testing.T, dir string)
	}
	cases := []struct {
		name   string
		src    source
		file   string // base name of the file named, "" for the single source
		tensor string
		want   string
	}{
		// Format description: 8-byte little-endian header length, then the header.
		{"header length larger than file", source{single: withLength(1 << 20)}, "", "", "header length 1048576 exceeds"},
		{"header over the cap", source{single: withLength(100_000_001)}, "", "", "exceeds the cap of 100000000"},
		{"header not UTF-8", source{single: file("{\"w\xfe\":{}}", nil)}, "", "", "not valid UTF-8"},
		{"JSON not an object", source{single: file(`[]`, nil)}, "", "", "header must be a JSON object"},
		{"metadata value not a string", source{single: file(`{"__metadata__":{"k":1}}`, nil)}, "", "", `"__metadata__" value for key "k" must be a string`},
		{"missing tensor field", source{single: file(`{"w":{"dtype":"F32","shape":[2]}}`, make([]byte, 8))}, "", "w", `missing field "data_offsets"`},
		{"extra tensor field", source{single: file(`{"w":{"dtype":"F32","shape":[2],"data_offsets":[0,8],"scale":1}}`, make([]byte, 8))}, "", "w", `unexpected field "scale"`},
		{"negative shape", source{single: file(`{"w":{"dtype":"F32","shape":[-2],"data_offsets":[0,8]}}`, make([]byte, 8))}, "", "w", "shape dimension -2 is negative"},
		{"non-integer shape", source{single: file(`{"w":{"dtype":"F32","shape":[2.5],"data_offsets":[0,8]}}`, make([]byte, 8))}, "", "w", "shape dimension 2.5 is not an integer"},
		{"shape product overflow", source{single: file(`{"w":{"dtype":"F32","shape":[4294967296,4294967296],"data_offsets":[0,8]}}`, make([]byte, 8))}, "", "w", "overflows 64-bit size"},
		{"offsets not from 0", source{single: file(`{"w":{"dtype":"F32","shape":[2],"data_offsets":[4,12]}}`, make([]byte, 12))}, "", "w", "leave a hole of 4 bytes"},
		{"offsets overlapping", source{single: file(`{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"b":{"dtype":"F32","shape":[2],"data_offsets":[4,12]}}`, make([]byte, 12))}, "", "b", `overlap tensor "a"`},
		{"offsets reversed", source{single: file(`{"w":{"dtype":"F32","shape":[2],"data_offsets":[8,0]}}`, make([]byte, 8))}, "", "w", "are reversed"},
		{"offsets past the end", source{single: file(entry, make([]byte, 12))}, "", "w", "run past the end of the 12-byte data section"},
		{"trailing bytes", source{single: file(entry, make([]byte, 20))}, "", "", "4 trailing bytes after the last tensor"},
		{"duplicate tensor across shards", source{shards: func(t *testing.T, dir string) {
			require.NoError(t, convert.WriteFile(filepath.Join(dir, "model-00003-of-00003.safetensors"), []convert.WriteTensor{
				{Name: "blocks.0.attn.q.weight", DType: "U8", Shape: []int64{1}, Data: []byte{1}},
			}, nil))
		}}, "model-00003-of-00003.safetensors", "blocks.0.attn.q.weight", `is also in shard "model-00001-of-00003.safetensors"`},
		{"missing shard", source{shards: func(t *testing.T, dir string) {
			require.NoError(t, os.Remove(filepath.Join(dir, "model-00002-of-00003.safetensors")))
		}}, shardIndexName, "", `missing shard "model-00002-of-00003.safetensors"`},
		{"shard path escaping the directory", source{shards: func(t *testing.T, dir string) {
			path := filepath.Join(dir, shardIndexName)
			b, err := os.ReadFile(path)
			require.NoError(t, err)
			b = []byte(strings.ReplaceAll(string(b), `"model-00003-of-00003.safetensors"`, `"../model-00003-of-00003.safetensors"`))
			require.NoError(t, os.WriteFile(path, b, 0o644))
		}}, shardIndexName, "", `shard "../model-00003-of-00003.safetensors" leaves the index's directory`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := filepath.Join(t.TempDir(), "src")
			require.NoError(t, os.Mkdir(dir, 0o755))
			src := filepath.Join(dir, "bad.safetensors")
			named := src
			if c.src.shards != nil {
				writeShardedModel(t, dir)
				c.src.shards(t, dir)
				src, named = dir, filepath.Join(dir, c.file)
			} else {
				require.NoError(t, os.WriteFile(src, c.src.single, 0o644))
			}
			before, err := os.ReadDir(dir)
			require.NoError(t, err)
			outDir := t.TempDir()
			code, out, errOut := ternkit("pack", src, "-o", filepath.Join(outDir, "out.tkart"))
			require.Equal(t, exitInput, code, "stdout: %s", out)
			require.True(t, strings.HasPrefix(errOut, "ternkit: "+named+": "), errOut)
			require.Contains(t, errOut, c.want)
			require.Contains(t, errOut, ": byte ")
			if c.tensor != "" {
				require.Contains(t, errOut, `tensor "`+c.tensor+`"`)
			}
			after, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Equal(t, len(before), len(after), "nothing written beside the source")
			written, err := os.ReadDir(outDir)
			require.NoError(t, err)
			require.Empty(t, written, "nothing at the destination")
		})
	}
}
