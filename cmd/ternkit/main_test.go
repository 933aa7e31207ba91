package main

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
)

// ternkit runs the command line in-process and returns exit code, stdout
// and stderr.
func ternkit(args ...string) (int, string, string) {
	var out, errOut bytes.Buffer
	code := run(args, &out, &errOut)
	return code, out.String(), errOut.String()
}

// demoArtifact runs the demo once into dir and returns the paths.
func demoArtifact(t *testing.T, dir string, extra ...string) (src, art string) {
	t.Helper()
	code, out, errOut := ternkit(append([]string{"demo", "--dir", dir}, extra...)...)
	require.Equal(t, exitOK, code, "stdout:\n%s\nstderr:\n%s", out, errOut)
	return filepath.Join(dir, demoModel+".safetensors"), filepath.Join(dir, demoModel+".tkart")
}

func TestDemo(t *testing.T) {
	dir := t.TempDir()
	code, out, errOut := ternkit("demo", "--dir", dir)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "verify: ok")
	require.Contains(t, out, "bits/weight")
	require.Contains(t, out, "bound: per-element bound holds")
	require.Contains(t, out, "1 of 28 tensors exact", "the last layer's MLP down projection is already ternary")
	require.FileExists(t, filepath.Join(dir, demoModel+".policy.toml"))
	require.Contains(t, errOut, "caution:")
	src, art := filepath.Join(dir, demoModel+".safetensors"), filepath.Join(dir, demoModel+".tkart")
	ss, err := os.Stat(src)
	require.NoError(t, err)
	as, err := os.Stat(art)
	require.NoError(t, err)
	require.Less(t, as.Size(), ss.Size()/2)

	code, out, _ = ternkit("verify", art, "--against", src)
	require.Equal(t, exitOK, code, out)
	code, out, _ = ternkit("inspect", art)
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "model.layers.0.self_attn.q_proj.weight")
	require.Contains(t, out, "file BLAKE3")
}

// Both sum orders pack and verify against the source; the artifact says
// which one it used.
func TestPackSumOrders(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	for _, order := range []string{"strided16", "sequential"} {
		art := filepath.Join(dir, order+".tkart")
		code, out, errOut := ternkit("pack", src, "-o", art, "--sum", order, "-q")
		require.Equal(t, exitOK, code, errOut)
		code, out, errOut = ternkit("verify", art, "--against", src)
		require.Equal(t, exitOK, code, "%s\n%s", out, errOut)
		code, out, _ = ternkit("inspect", art)
		require.Equal(t, exitOK, code)
		require.Contains(t, out, "sum "+order)
	}
}

func TestInspectJSON(t *testing.T) {
	_, art := demoArtifact(t, t.TempDir(), "--codec", "bits2")
	code, out, errOut := ternkit("inspect", art, "--json")
	require.Equal(t, exitOK, code, errOut)
	var rep struct {
		FileBLAKE3 string `json:"file_blake3"`
		Tensors    []struct {
			Name          string  `json:"name"`
			Shape         []int64 `json:"shape"`
			Kind          string  `json:"kind"`
			Codec         string  `json:"codec"`
			DType         string  `json:"dtype"`
			Granularity   string  `json:"granularity"`
			Exact         bool    `json:"exact"`
			Bytes         int64   `json:"bytes"`
			BitsPerWeight float64 `json:"bits_per_weight"`
			ZeroFraction  float64 `json:"zero_fraction"`
		} `json:"tensors"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &rep))
	require.Len(t, rep.FileBLAKE3, 64)
	kinds := map[string]int{}
	for _, tn := range rep.Tensors {
		kinds[tn.Kind]++
		switch {
		case tn.Kind == "ternary":
			require.Equal(t, "bits2", tn.Codec)
			// 2 bits per trit plus a float32 scale per group
			perScale := map[string]float64{"tensor": 0, "row": 32.0 / demoWidth, "group:128": 32.0 / 128}
			require.InDelta(t, 2+perScale[tn.Granularity], tn.BitsPerWeight, 1e-3, tn.Name)
			if tn.Exact {
				// the trained-ternary down projection's trits were drawn uniformly: p(0) = 1/3
				require.InDelta(t, 1.0/3, tn.ZeroFraction, 0.02, tn.Name)
			} else {
				// Gaussian latent weights: p(0) = 0.310 (normal table), per tensor of ≥ 65,536
				require.InDelta(t, 0.310, tn.ZeroFraction, 0.01, tn.Name)
			}
		case tn.Kind == "int8":
			require.InDelta(t, 8+32.0/demoWidth, tn.BitsPerWeight, 1e-9, tn.Name)
		case tn.DType == "I64":
			require.InDelta(t, 64.0, tn.BitsPerWeight, 1e-9, tn.Name)
		default:
			require.Equal(t, "raw", tn.Codec)
			bits := map[string]float64{"F32": 32, "F16": 16, "BF16": 16}[tn.DType]
			require.InDelta(t, bits, tn.BitsPerWeight, 1e-9, tn.Name)
		}
	}
	require.Equal(t, 7*demoLayers, kinds["ternary"])
	require.Equal(t, 1, kinds["int8"])

	// b3sum (Debian package b3sum, the BLAKE3 team's command-line tool) over
	// the whole artifact gives the same hash.
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	sum, err := exec.Command(b3sum, "--no-names", art).Output()
	require.NoError(t, err)
	require.Equal(t, strings.TrimSpace(string(sum)), rep.FileBLAKE3)
}

// A checkpoint written by an independent safetensors implementation
// (github.com/nlpodyssey/safetensors) packs and verifies against itself.
func TestPackIndependentFixture(t *testing.T) {
	dir := t.TempDir()
	f32 := make([]byte, 4*24)
	for i := 0; i < 24; i++ {
		binary.LittleEndian.PutUint32(f32[4*i:], math.Float32bits(float32(i%7)-3.1))
	}
	f16 := []byte{0x00, 0x3c, 0x00, 0xc0, 0xff, 0x7b, 0x00, 0x04} // IEEE 754 binary16: 1, -2, 65504, 2^-14
	views := map[string]safetensors.TensorView{}
	add := func(name string, dt safetensors.DType, shape []uint64, data []byte) {
		v, err := safetensors.NewTensorView(dt, shape, data)
		require.NoError(t, err)
		views[name] = v
	}
	add("layer.proj.weight", safetensors.F32, []uint64{4, 6}, f32)
	add("layer.norm.weight", safetensors.F16, []uint64{4}, f16)
	add("layer.gate.weight", safetensors.F16, []uint64{2, 2}, f16)
	buf, err := safetensors.Serialize(views, map[string]string{"writer": "independent"})
	require.NoError(t, err)
	src := filepath.Join(dir, "indep.safetensors")
	require.NoError(t, os.WriteFile(src, buf, 0o644))

	art := filepath.Join(dir, "indep.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "2 ternary, 0 int8, 1 kept")
	code, out, errOut = ternkit("verify", art, "--against", src)
	require.Equal(t, exitOK, code, out+errOut)
	code, out, _ = ternkit("verify", art, "--json")
	require.Equal(t, exitOK, code)
	var rep struct {
		OK     bool `json:"ok"`
		Failed int  `json:"failed"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &rep))
	require.True(t, rep.OK)
	requireIndependentFixtureValues(t, art, f16)
}

// rawSafetensors builds a file from a header text and data bytes, the
// layout of the published format description: 8-byte little-endian header
// length, the JSON header, the data section.
func rawSafetensors(header string, data []byte) []byte {
	b := make([]byte, 8, 8+len(header)+len(data))
	binary.LittleEndian.PutUint64(b, uint64(len(header)))
	b = append(b, header...)
	return append(b, data...)
}

func TestPackBadInput(t *testing.T) {
	nan := make([]byte, 16)
	binary.LittleEndian.PutUint32(nan[8:], math.Float32bits(float32(math.NaN())))
	inf := make([]byte, 8)
	binary.LittleEndian.PutUint16(inf[2:], 0x7c00) // F16 +Inf (IEEE 754 binary16)
	good := `{"w":{"dtype":"F32","shape":[2,2],"data_offsets":[0,16]}}`
	cases := []struct {
		name   string
		file   []byte
		tensor string // named in the message, "" when the problem is the header
		want   string
	}{
		{"empty file", nil, "", "byte"},
		{"truncated data", rawSafetensors(good, make([]byte, 12)), "w", "truncated"},
		{"header length past end", func() []byte {
			b := rawSafetensors(good, make([]byte, 16))
			binary.LittleEndian.PutUint64(b, 1<<20)
			return b
		}(), "", "header"},
		{"invalid json", rawSafetensors(`{"w":{"dtype":"F32",`, nil), "", "header"},
		{"offsets hole", rawSafetensors(`{"a":{"dtype":"F32","shape":[1],"data_offsets":[0,4]},"b":{"dtype":"F32","shape":[1],"data_offsets":[8,12]}}`, make([]byte, 12)), "b", "offsets"},
		{"offsets overlap", rawSafetensors(`{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"b":{"dtype":"F32","shape":[2],"data_offsets":[4,12]}}`, make([]byte, 12)), "b", "offsets"},
		{"size not shape x dtype", rawSafetensors(`{"w":{"dtype":"F32","shape":[2,2],"data_offsets":[0,12]}}`, make([]byte, 12)), "w", "offsets"},
		{"dtype not a dtype name", rawSafetensors(`{"w":{"dtype":"f12","shape":[2],"data_offsets":[0,4]}}`, make([]byte, 4)), "w", "f12"},
		{"nan in ternary tensor", rawSafetensors(good, nan), "w", "element 2"},
		{"inf in ternary tensor", rawSafetensors(`{"w":{"dtype":"F16","shape":[2,2],"data_offsets":[0,8]}}`, inf), "w", "element 1"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			src := filepath.Join(dir, "bad.safetensors")
			require.NoError(t, os.WriteFile(src, c.file, 0o644))
			dst := filepath.Join(dir, "out.tkart")
			code, out, errOut := ternkit("pack", src, "-o", dst)
			require.Equal(t, exitInput, code, "stdout: %s", out)
			require.Contains(t, errOut, src)
			require.Contains(t, errOut, "byte ")
			require.Contains(t, errOut, c.want)
			if c.tensor != "" {
				require.Contains(t, errOut, `tensor "`+c.tensor+`"`)
			}
			entries, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Len(t, entries, 1, "nothing written beside the source")
		})
	}
}

// The element offset of a NaN is reported exactly: data section start +
// 4 bytes × element index.
func TestPackNaNOffset(t *testing.T) {
	dir := t.TempDir()
	header := `{"w":{"dtype":"F32","shape":[2,2],"data_offsets":[0,16]}}`
	nan := make([]byte, 16)
	binary.LittleEndian.PutUint32(nan[12:], math.Float32bits(float32(math.NaN())))
	src := filepath.Join(dir, "nan.safetensors")
	require.NoError(t, os.WriteFile(src, rawSafetensors(header, nan), 0o644))
	code, _, errOut := ternkit("pack", src, "-o", filepath.Join(dir, "o.tkart"))
	require.Equal(t, exitInput, code)
	want := 8 + len(header) + 12
	require.Contains(t, errOut, "byte "+strconv.Itoa(want)+":")
}

func TestVerifyCorruptExitsOne(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	for _, off := range []int{12, 70, len(b) / 2, len(b) - 100, len(b) - 1} {
		c := append([]byte(nil), b...)
		c[off] ^= 0x04
		bad := filepath.Join(dir, "bad.tkart")
		require.NoError(t, os.WriteFile(bad, c, 0o644))
		code, out, _ := ternkit("verify", bad)
		require.Equal(t, exitFailed, code, "flip at %d: %s", off, out)
		require.Contains(t, out, "FAIL")
		code, _, _ = ternkit("verify", bad, "--against", src)
		require.Equal(t, exitFailed, code, "flip at %d with --against", off)
	}
	// A first byte changed leaves no magic: not an artifact, an input
	// error (exit 2) as in every command.
	c := append([]byte(nil), b...)
	c[0] ^= 0x04
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, c, 0o644))
	code, _, errOut := ternkit("verify", bad)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "not a ternkit artifact")
}

func TestUsageErrors(t *testing.T) {
	dir := t.TempDir()
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"pack", "x.safetensors", "-o", "y.tkart", "--codec", "base4"}, "valid: bits2, base3"},
		{[]string{"pack", "x.safetensors"}, "needs -o"},
		{[]string{"pack", "x.safetensors", "-o", dir}, "is a directory"},
		{[]string{"pack", "x.safetensors", "-o", "y", "--scale-rule", "cube"}, `"cube"`},
		{[]string{"pack", "x.safetensors", "-o", "y", "--tie", "up"}, `"up"`},
		{[]string{"pack", "a", "b", "-o", "y"}, "takes 1 argument"},
		{[]string{"verify"}, "takes 1 argument"},
		{[]string{"verify", filepath.Join(dir, "missing.tkart")}, "missing.tkart"},
		{[]string{"inspect", filepath.Join(dir, "missing.tkart")}, "missing.tkart"},
		{[]string{"pack", filepath.Join(dir, "missing.safetensors"), "-o", filepath.Join(dir, "o")}, "missing.safetensors"},
		{[]string{"verify", "--bogus"}, "--bogus"},
	}
	for _, c := range cases {
		code, _, errOut := ternkit(c.args...)
		require.Equal(t, exitInput, code, "%v: %s", c.args, errOut)
		require.Contains(t, errOut, c.want, "%v", c.args)
	}
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Empty(t, entries)
}

func TestPrintPolicy(t *testing.T) {
	code, out, errOut := ternkit("pack", "--print-policy")
	require.Equal(t, exitOK, code, errOut)
	p, err := convert.ParsePolicy("printed", []byte(out))
	require.NoError(t, err)
	require.Equal(t, convert.DefaultPolicy(), p)

	code, out, _ = ternkit("pack", "--print-policy", "--rule", "*.mlp.*=ternary:group:64")
	require.Equal(t, exitOK, code)
	p, err = convert.ParsePolicy("printed", []byte(out))
	require.NoError(t, err)
	require.Equal(t, "*.mlp.*", p.Rules[0].Match)
	require.Len(t, p.Rules, len(convert.DefaultPolicy().Rules)+1)

	code, _, errOut = ternkit("pack", "--print-policy", "model.safetensors")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "takes 0 argument")
}

// writeFixture writes a checkpoint with the independent safetensors
// library and returns its path.
func writeFixture(t *testing.T, dir string, tensors map[string][]float32, shapes map[string][]uint64) string {
	t.Helper()
	views := map[string]safetensors.TensorView{}
	for name, v := range tensors {
		b := make([]byte, 4*len(v))
		for i, f := range v {
			binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(f))
		}
		tv, err := safetensors.NewTensorView(safetensors.F32, shapes[name], b)
		require.NoError(t, err)
		views[name] = tv
	}
	buf, err := safetensors.Serialize(views, nil)
	require.NoError(t, err)
	src := filepath.Join(dir, "fixture.safetensors")
	require.NoError(t, os.WriteFile(src, buf, 0o644))
	return src
}

func TestPackPolicy(t *testing.T) {
	dir := t.TempDir()
	w := make([]float32, 8*16)
	for i := range w {
		w[i] = float32(i%5) - 2.2
	}
	src := writeFixture(t, dir, map[string][]float32{"layer.proj.weight": w, "layer.norm.weight": w[:16]},
		map[string][]uint64{"layer.proj.weight": {8, 16}, "layer.norm.weight": {16}})
	art := filepath.Join(dir, "a.tkart")

	// rules from flags come first; a rule matching nothing is a warning
	code, out, errOut := ternkit("pack", src, "-o", art, "--rule", "*.proj.*=ternary:group:8", "--rule", "missing.*=int8")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, errOut, `warning: rule "missing.* = int8" matches no tensor`)
	require.Contains(t, out, "1 ternary")
	code, out, _ = ternkit("verify", art, "--against", src)
	require.Equal(t, exitOK, code, out)
	require.Contains(t, out, "bound: per-element bound holds")
	code, out, _ = ternkit("inspect", art, "--json")
	require.Equal(t, exitOK, code)
	require.Contains(t, out, `"granularity": "group:8"`)

	// a policy file
	pol := filepath.Join(dir, "p.toml")
	require.NoError(t, os.WriteFile(pol, []byte("[[rule]]\nmatch = \"*\"\ndims = 2\naction = \"int8\"\n"), 0o644))
	code, out, errOut = ternkit("pack", src, "-o", art, "--policy", pol)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "0 ternary, 1 int8, 1 kept")
	require.NotContains(t, errOut, "caution", "no ternary tensor, no caution")

	// an action the tensor cannot take: exit 2 naming rule and tensor, nothing written
	bad := filepath.Join(dir, "b.tkart")
	code, _, errOut = ternkit("pack", src, "-o", bad, "--rule", "*norm*=ternary")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `"layer.norm.weight"`)
	require.Contains(t, errOut, "*norm* = ternary")
	require.Contains(t, errOut, src)
	_, err := os.Stat(bad)
	require.ErrorIs(t, err, os.ErrNotExist)

	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--rule", "*=ternery"}, `"ternery"`},
		{[]string{"--rule", "nothing"}, `"nothing"`},
		{[]string{"--policy", filepath.Join(dir, "none.toml")}, "none.toml"},
		{[]string{"--policy", src}, src},
	} {
		code, _, errOut := ternkit(append([]string{"pack", src, "-o", bad}, c.args...)...)
		require.Equal(t, exitInput, code, c.args)
		require.Contains(t, errOut, c.want, c.args)
	}
}

// An already-ternary checkpoint packs exact, losslessly, with no caution.
func TestPackExactNoCaution(t *testing.T) {
	dir := t.TempDir()
	w := make([]float32, 4*8)
	for i := range w {
		w[i] = 0.25 * float32(i%3-1)
	}
	src := writeFixture(t, dir, map[string][]float32{"block.proj.weight": w}, map[string][]uint64{"block.proj.weight": {4, 8}})
	art := filepath.Join(dir, "a.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "1 of 1 tensors exact")
	require.NotContains(t, errOut, "caution")
	code, out, _ = ternkit("inspect", art)
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "exact")
}

func TestVerifyBudget(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	// Gaussian latent weights ternarized: relative RMS error about 0.51
	code, out, _ := ternkit("verify", art, "--max-rel-rmse", "0.6", "--min-cosine", "model.layers.*=0.8")
	require.Equal(t, exitOK, code, out)
	code, out, _ = ternkit("verify", art, "--max-rel-rmse", "model.layers.0.self_attn.q_proj.weight=0.3")
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, `FAIL budget "model.layers.0.self_attn.q_proj.weight": max_rel_rmse 0.51`)
	require.Contains(t, out, "beyond the limit 0.3")
	require.Contains(t, out, "1 of")

	budget := filepath.Join(dir, "budget.toml")
	require.NoError(t, os.WriteFile(budget, []byte("[[budget]]\nmatch = \"*.mlp.*\"\nmax_clipped = 0.01\n\n[[budget]]\nmatch = \"missing.*\"\nmin_cosine = 0.5\n"), 0o644))
	code, out, _ = ternkit("verify", art, "--budget", budget, "--json")
	require.Equal(t, exitFailed, code)
	var rep struct {
		OK       bool     `json:"ok"`
		Warnings []string `json:"warnings"`
		Checks   []struct {
			Check  string `json:"check"`
			Tensor string `json:"tensor"`
			OK     bool   `json:"ok"`
		} `json:"checks"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &rep))
	require.False(t, rep.OK)
	require.Contains(t, rep.Warnings, "budget missing.* min_cosine 0.5 matches no tensor with statistics")
	for _, w := range rep.Warnings[1:] {
		require.Contains(t, w, "has statistics that no budget covers")
		require.NotContains(t, w, ".mlp.", "the budget covers these")
	}
	failed := 0
	for _, c := range rep.Checks {
		if c.Check == "budget" && !c.OK {
			require.Contains(t, c.Tensor, ".mlp.")
			failed++
		}
	}
	require.Equal(t, 3*demoLayers-1, failed, "every MLP projection but the trained-ternary one clips")

	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--max-clipped", "lots"}, `"lots"`},
		{[]string{"--budget", filepath.Join(dir, "none.toml")}, "none.toml"},
		{[]string{"--budget", art}, art},
	} {
		code, _, errOut := ternkit(append([]string{"verify", art}, c.args...)...)
		require.Equal(t, exitInput, code, c.args)
		require.Contains(t, errOut, c.want, c.args)
	}
}

// The same source and options give byte-identical artifacts for any worker
// count, and verify gives the same report for any worker count.
func TestPackAnyWorkersSameBytes(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	var first []byte
	for _, workers := range []string{"1", "2", "8"} {
		out := filepath.Join(dir, "w"+workers+".tkart")
		code, _, errOut := ternkit("pack", src, "-o", out, "--workers", workers)
		require.Equal(t, exitOK, code, errOut)
		b, err := os.ReadFile(out)
		require.NoError(t, err)
		if first == nil {
			first = b
			continue
		}
		require.True(t, bytes.Equal(first, b), "--workers %s gives other bytes", workers)
	}
	var reports []string
	for _, workers := range []string{"1", "3"} {
		code, out, _ := ternkit("verify", filepath.Join(dir, "w1.tkart"), "--against", src, "--json", "--workers", workers)
		require.Equal(t, exitOK, code, out)
		reports = append(reports, out)
	}
	require.Equal(t, reports[0], reports[1])
	code, _, errOut := ternkit("pack", src, "-o", filepath.Join(dir, "x.tkart"), "--workers", "0")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "--workers 0")
}
