package main

import (
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/modelconfig"
)

// The plan for the measured sizes lands within half a layer of the target
// and doubling the target keeps the shapes and doubles the layers (about).
func TestPlanSizes(t *testing.T) {
	perLayer := 2 * float64(4*2048*2048+3*2048*5632+2*2048)
	for _, tc := range []struct {
		size   float64
		layers int
	}{{1.5e9, 12}, {3e9, 27}} {
		files, layers := plan(midSized, tc.size, 1)
		require.Equal(t, tc.layers, layers)
		var bytes float64
		largest := int64(0)
		for _, p := range files[0] {
			bytes += 2 * float64(p.elements())
			largest = max(largest, p.elements())
		}
		require.LessOrEqual(t, math.Abs(bytes-tc.size), perLayer/2)
		require.Equal(t, int64(32000*2048), largest, "the embedding is the largest tensor")
	}
}

// A small sharded set and a single file, written with tiny widths, open
// through convert with the planned tensors.
func TestRunWritesReadableCheckpoints(t *testing.T) {
	tiny := dims{hidden: 8, ffn: 16, vocab: 32}
	dir := t.TempDir()
	set := filepath.Join(dir, "set")
	require.NoError(t, run(set, tiny, 1e4, 3, 1, ""))
	s, err := convert.Open(set)
	require.NoError(t, err)
	defer s.Close()
	require.Len(t, s.Files, 3)
	require.Empty(t, s.Warnings, "total_size matches the shards")
	files, layers := plan(tiny, 1e4, 3)
	want := 0
	for _, f := range files {
		want += len(f)
	}
	require.Len(t, s.Tensors, want)
	require.Equal(t, 9*layers+3, want)
	require.Equal(t, "fernmoss-scout-bulk", s.Metadata["model"])
	requirePlanned(t, files, s)

	single := filepath.Join(dir, "one.safetensors")
	require.NoError(t, run(single, tiny, 1e4, 1, 1, filepath.Join(dir, "config.json")))
	s1, err := convert.Open(single)
	require.NoError(t, err)
	defer s1.Close()
	require.Len(t, s1.Tensors, want)
	single1, _ := plan(tiny, 1e4, 1)
	requirePlanned(t, single1, s1)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 3, "the set, the file and its config")

	data, err := os.ReadFile(filepath.Join(dir, "config.json"))
	require.NoError(t, err)
	cfg, err := modelconfig.Parse("config.json", data)
	require.NoError(t, err)
	require.Equal(t, tiny.hidden, cfg.HiddenSize)
	require.Equal(t, tiny.ffn, cfg.IntermediateSize)
	require.Equal(t, tiny.vocab, cfg.VocabSize)
	require.Equal(t, int64(layers), cfg.NumHiddenLayers)
	require.Equal(t, cfg.NumAttentionHeads*cfg.HeadDim, cfg.HiddenSize)
	require.Contains(t, s1.Tensors[0].Name, "model.embed_tokens", "the common decoder layout")
}

// requirePlanned checks every opened tensor against the plan, name by
// name: dtype, shape, its bytes (2 per BF16 value), and that each shard
// holds exactly the tensors planned for it.
func requirePlanned(t *testing.T, files [][]tensorPlan, s *convert.Source) {
	t.Helper()
	type where struct {
		p     tensorPlan
		shard int
	}
	planned := map[string]where{}
	for k, f := range files {
		for _, p := range f {
			planned[p.spec.Name] = where{p, k}
		}
	}
	require.Len(t, planned, len(s.Tensors), "names are unique")
	shardFile := map[int]string{}
	for _, st := range s.Tensors {
		w, ok := planned[st.Name]
		require.True(t, ok, "%s was not planned", st.Name)
		require.Equal(t, w.p.spec.DType, st.DType, st.Name)
		require.Equal(t, w.p.spec.Shape, st.Shape, st.Name)
		require.Equal(t, 2*w.p.elements(), st.Length, st.Name)
		if f, ok := shardFile[w.shard]; ok {
			require.Equal(t, f, st.File, "%s: shard %d", st.Name, w.shard)
		}
		shardFile[w.shard] = st.File
	}
	require.Len(t, shardFile, len(files), "one file per shard")
}
