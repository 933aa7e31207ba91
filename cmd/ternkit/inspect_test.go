package main

import (
	"encoding/binary"
	"encoding/json"
	"flag"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/")

// writeVector writes the small vector checkpoint used by the inspect
// goldens, every number of which is worked out by hand below, and packs it
// (base3) in dir as vector.tkart.
//
//	embed.weight          F32 [3x2]  kept (embedding): 24 bytes, 32 bits per value
//	layers.0.proj.weight  F32 [2x5]  0.1 -0.2 0.3 -0.4 0.5 -0.6 0.7 -0.8 0.9 -0.5
//	    gamma = mean|w| = 5.0/10 = 0.5; w/gamma = 0.2 -0.4 0.6 -0.8 1 -1.2 1.4 -1.6 1.8 -1
//	    trits = 0 0 1 -1 1 -1 1 -1 1 -1: 2 zeros of 10 = 20.0 %
//	    w - 0.5·t = 0.1 -0.2 -0.2 0.1 0 -0.1 0.2 -0.3 0.4 0: Σ² = 0.40; Σw² = 3.10
//	    relative RMSE = sqrt(0.40/3.10) = 0.3592; base3: ceil(10/5) = 2 bytes, 1.6 bits/weight
//	    cosine = Σw·t / (|w|·|t|) = 4.7 / (sqrt(3.10)·sqrt(8)) = 0.9438
//	layers.0.norm.weight  F16 [4]    kept: 8 bytes, 16 bits per value
//	layers.1.proj.weight  BF16 [4x4] rows 1 -1 0 0: already 1 × {-1, 0, +1}, so stored exact
//	    with scale 1 (absmean's gamma would be 8/16 = 0.5) and relative RMSE 0
//	    8 zeros of 16 = 50.0 %; base3: ceil(16/5) = 4 bytes, 2.0 bits/weight
//	totals: 26 ternary weights in 6 bytes: 48/26 = 1.846 bits/weight; zeros 10/26 = 38.5 %
//	weight memory, as a runtime holds it: each ternary tensor's base3 payload
//	    and its one float32 scale, (2 + 4) + (4 + 4) = 14 B, and the kept
//	    tensors as stored, 24 + 8: 46 B; against every float tensor at F16,
//	    2 bytes × (6 + 10 + 4 + 16) values = 72 B
//	size: source 456 B and the artifact from its parts, in TestInspectVectorSizeLine
//
// The formulas are the absmean method's (Ma et al. 2024); the F16 and BF16
// bytes are IEEE 754 binary16 and the upper half of binary32.
func writeVector(t *testing.T, dir string) (src, art string) {
	t.Helper()
	f32 := func(v ...float32) []byte {
		b := make([]byte, 4*len(v))
		for i, f := range v {
			binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(f))
		}
		return b
	}
	u16 := func(v ...uint16) []byte {
		b := make([]byte, 2*len(v))
		for i, x := range v {
			binary.LittleEndian.PutUint16(b[2*i:], x)
		}
		return b
	}
	var bf16 []uint16
	for range 4 {
		bf16 = append(bf16, 0x3F80, 0xBF80, 0, 0) // 1, -1, 0, 0 (bfloat16)
	}
	tensors := []convert.WriteTensor{
		{Name: "embed.weight", DType: "F32", Shape: []int64{3, 2}, Data: f32(0.5, -0.5, 1, -1, 2, -2)},
		{Name: "layers.0.proj.weight", DType: "F32", Shape: []int64{2, 5}, Data: f32(0.1, -0.2, 0.3, -0.4, 0.5, -0.6, 0.7, -0.8, 0.9, -0.5)},
		{Name: "layers.0.norm.weight", DType: "F16", Shape: []int64{4}, Data: u16(0x3C00, 0xC000, 0x7BFF, 0x0400)}, // 1, -2, 65504, 2^-14
		{Name: "layers.1.proj.weight", DType: "BF16", Shape: []int64{4, 4}, Data: u16(bf16...)},
	}
	src, art = filepath.Join(dir, "vector.safetensors"), filepath.Join(dir, "vector.tkart")
	require.NoError(t, convert.WriteFile(src, tensors, map[string]string{"model": "inspect-vector"}))
	code, _, errOut := ternkit("pack", src, "-o", art, "--codec", "base3")
	require.Equal(t, exitOK, code, errOut)
	return src, art
}

var hexHash = regexp.MustCompile(`\b[0-9a-f]{64}\b`)

// checkGolden compares got with testdata/name, with BLAKE3 digests masked
// (they change with any byte of the manifest; b3sum checks them elsewhere).
func checkGolden(t *testing.T, name, got string) {
	t.Helper()
	require.Regexp(t, `file BLAKE3 +[0-9a-f]{64}\n`, got)
	got = hexHash.ReplaceAllString(got, "<blake3>")
	path := filepath.Join("testdata", name)
	if *update {
		require.NoError(t, os.MkdirAll("testdata", 0o755))
		require.NoError(t, os.WriteFile(path, []byte(got), 0o644))
	}
	want, err := os.ReadFile(path)
	require.NoError(t, err, "run go test ./cmd/ternkit -run Golden -update to create it")
	require.Equal(t, string(want), got)
}

func TestInspectGolden(t *testing.T) {
	_, art := writeVector(t, t.TempDir())
	cases := []struct {
		golden string
		args   []string
	}{
		{"inspect_vector.golden", nil},
		{"inspect_vector_sorted.golden", []string{"--sort", "error", "--tensor", "layers.*.proj.*", "--tensor", "embed.*"}},
	}
	for _, c := range cases {
		t.Run(c.golden, func(t *testing.T) {
			code, out, errOut := ternkit(append([]string{"inspect", art}, c.args...)...)
			require.Equal(t, exitOK, code, errOut)
			checkGolden(t, c.golden, out)
		})
	}
}

// The hand-worked values of writeVector, through inspect --json.
func TestInspectVectorJSON(t *testing.T) {
	_, art := writeVector(t, t.TempDir())
	code, out, errOut := ternkit("inspect", art, "--json")
	require.Equal(t, exitOK, code, errOut)
	var rep struct {
		Ratio        float64 `json:"ratio"`
		ZeroFraction float64 `json:"zero_fraction"`
		WeightMemory struct {
			Ternary int64 `json:"ternary_form_bytes"`
			F16     int64 `json:"f16_form_bytes"`
		} `json:"weight_memory"`
		Totals struct {
			TernaryParams int64   `json:"ternary_params"`
			Bits          float64 `json:"bits_per_ternary_weight"`
			SourceBytes   int64   `json:"source_bytes"`
		} `json:"totals"`
		Tensors []struct {
			Name    string  `json:"name"`
			Kind    string  `json:"kind"`
			Bits    float64 `json:"bits_per_weight"`
			Zero    float64 `json:"zero_fraction"`
			RelRMSE float64 `json:"rel_rmse"`
			Bytes   int64   `json:"bytes"`
		} `json:"tensors"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &rep))
	require.Equal(t, int64(26), rep.Totals.TernaryParams)
	require.InDelta(t, 48.0/26, rep.Totals.Bits, 1e-12)
	require.InDelta(t, 10.0/26, rep.ZeroFraction, 1e-12)
	require.Equal(t, int64(46), rep.WeightMemory.Ternary)
	require.Equal(t, int64(72), rep.WeightMemory.F16)
	st, err := os.Stat(art)
	require.NoError(t, err)
	require.InDelta(t, float64(rep.Totals.SourceBytes)/float64(st.Size()), rep.Ratio, 1e-12)

	want := []struct {
		name       string
		kind       string
		bits, zero float64
		rel        float64
		bytes      int64
	}{
		{"embed.weight", "kept", 32, 0, 0, 24},
		{"layers.0.proj.weight", "ternary", 1.6, 0.2, math.Sqrt(0.40 / 3.10), 2},
		{"layers.0.norm.weight", "kept", 16, 0, 0, 8},
		{"layers.1.proj.weight", "ternary", 2.0, 0.5, 0, 4},
	}
	require.Len(t, rep.Tensors, len(want))
	for i, w := range want {
		g := rep.Tensors[i]
		require.Equal(t, w.name, g.Name)
		require.Equal(t, w.kind, g.Kind, w.name)
		require.InDelta(t, w.bits, g.Bits, 1e-12, w.name)
		require.InDelta(t, w.zero, g.Zero, 1e-12, w.name)
		require.InDelta(t, w.rel, g.RelRMSE, 1e-6, w.name) // float32 weights: 0.1 etc. are not exact
		require.Equal(t, w.bytes, g.Bytes, w.name)
	}
}

func TestInspectSortAndFilter(t *testing.T) {
	_, art := writeVector(t, t.TempDir())
	names := func(args ...string) []string {
		code, out, errOut := ternkit(append([]string{"inspect", art, "--json"}, args...)...)
		require.Equal(t, exitOK, code, errOut)
		var rep struct {
			Tensors []struct{ Name string } `json:"tensors"`
		}
		require.NoError(t, json.Unmarshal([]byte(out), &rep))
		var got []string
		for _, tn := range rep.Tensors {
			got = append(got, tn.Name)
		}
		return got
	}
	all := []string{"embed.weight", "layers.0.proj.weight", "layers.0.norm.weight", "layers.1.proj.weight"}
	cases := []struct {
		args []string
		want []string
	}{
		{nil, all},
		{[]string{"--sort", "file"}, all},
		{[]string{"--sort", "name"}, []string{"embed.weight", "layers.0.norm.weight", "layers.0.proj.weight", "layers.1.proj.weight"}},
		{[]string{"--sort", "error"}, []string{"layers.0.proj.weight", "embed.weight", "layers.0.norm.weight", "layers.1.proj.weight"}},
		{[]string{"--sort", "zero"}, []string{"layers.1.proj.weight", "layers.0.proj.weight", "embed.weight", "layers.0.norm.weight"}},
		{[]string{"--sort", "bits"}, []string{"embed.weight", "layers.0.norm.weight", "layers.1.proj.weight", "layers.0.proj.weight"}},
		{[]string{"--sort", "bytes"}, []string{"embed.weight", "layers.0.norm.weight", "layers.1.proj.weight", "layers.0.proj.weight"}},
		{[]string{"--sort", "kind"}, []string{"embed.weight", "layers.0.norm.weight", "layers.0.proj.weight", "layers.1.proj.weight"}},
		{[]string{"--tensor", "layers.0.*"}, []string{"layers.0.proj.weight", "layers.0.norm.weight"}},
		{[]string{"--tensor", "*.proj.weight", "--tensor", "embed.?eight"}, []string{"embed.weight", "layers.0.proj.weight", "layers.1.proj.weight"}},
		{[]string{"--tensor", "layers.[01].proj.weight", "--sort", "error"}, []string{"layers.0.proj.weight", "layers.1.proj.weight"}},
		{[]string{"--tensor", "layers.[01].proj.weight", "--sort", "zero"}, []string{"layers.1.proj.weight", "layers.0.proj.weight"}},
	}
	for _, c := range cases {
		require.Equal(t, c.want, names(c.args...), "%v", c.args)
	}
}
