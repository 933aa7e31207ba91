package probe

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"ternkit/manifest"
	"ternkit/pack"
)

// requireTorch returns the python3 that has torch (Debian python3-torch),
// or skips the test; under CI (the CI environment variable set) a missing
// torch fails it.
func requireTorch(t *testing.T) string {
	t.Helper()
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import torch").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("torch is required under CI (apt-get install python3-torch): %v", err)
		}
		t.Skipf("skipping: %s cannot import torch (apt-get install python3-torch): %v", py, err)
	}
	return py
}

// torchJob is one forward pass for testdata/forward_torch.py.
type torchJob struct {
	Model   string    `json:"model"`
	Config  string    `json:"config"`
	Tokens  [][]int32 `json:"tokens"`
	Ternary []string  `json:"ternary"` // nil: float activations everywhere
}

// torchLogits runs testdata/forward_torch.py once for every job.
func torchLogits(t *testing.T, py string, jobs []torchJob) [][]float32 {
	t.Helper()
	data, _ := json.Marshal(jobs)
	path := filepath.Join(t.TempDir(), "jobs.json")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	var stderr bytes.Buffer
	cmd := exec.Command(py, "testdata/forward_torch.py", path)
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("forward_torch.py: %v\n%s", err, stderr.String())
	}
	var res [][][]float64
	if err := json.Unmarshal(out, &res); err != nil {
		t.Fatal(err)
	}
	if len(res) != len(jobs) {
		t.Fatalf("forward_torch.py: %d results for %d jobs", len(res), len(jobs))
	}
	flat := make([][]float32, len(res))
	for j, rows := range res {
		for _, r := range rows {
			for _, v := range r {
				flat[j] = append(flat[j], float32(v))
			}
		}
	}
	return flat
}

// runAlone runs one model's forward pass.
func runAlone(t *testing.T, a *Arch, w Weights, seqs [][]int32) []float32 {
	t.Helper()
	if err := a.Place(w); err != nil {
		t.Fatal(err)
	}
	st, err := Start(a, w, seqs)
	if err != nil {
		t.Fatal(err)
	}
	for range a.Layers {
		if err := st.Layer(); err != nil {
			t.Fatal(err)
		}
	}
	z, err := st.Logits()
	if err != nil {
		t.Fatal(err)
	}
	return z
}

// agree requires max|got − want| ≤ tol · max|want| over all logits, and
// returns the relative error and the fraction of positions with the same
// argmax.
func agree(t *testing.T, what string, got, want []float32, vocab int, tol float64) (rel, top1 float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d logits, torch %d", what, len(got), len(want))
	}
	var diff, scale float64
	for i := range got {
		diff = max(diff, math.Abs(float64(got[i])-float64(want[i])))
		scale = max(scale, math.Abs(float64(want[i])))
	}
	rel = diff / scale
	n := len(got) / vocab
	for p := range n {
		if TopK(got[p*vocab:(p+1)*vocab], 1)[0] == TopK(want[p*vocab:(p+1)*vocab], 1)[0] {
			top1++
		}
	}
	top1 /= float64(n)
	if rel > tol {
		t.Errorf("%s: logits differ from torch by %.3g relative (max |diff| %.3g over max |logit| %.3g), tolerance %g", what, rel, diff, scale, tol)
	}
	return rel, top1
}

// TestAgainstTorch holds the forward pass to an independent one in torch
// (Debian python3-torch; testdata/forward_torch.py, written from the
// published formulas) on small random models with grouped-query attention,
// tied and untied heads, biases and inner norms, three activations: float
// logits agree within 1e-4 relative to the largest logit, and the int8
// path agrees with torch's fake-quantized version within the same
// tolerance, with the same top-1 token at every position.
func TestAgainstTorch(t *testing.T) {
	py := requireTorch(t)
	const tol = 1e-4
	type check struct {
		what  string
		vocab int
		got   []float32
		top1  bool // the top-1 token must agree everywhere
	}
	var (
		jobs   []torchJob
		checks []check
	)
	for _, m := range []tinyModel{
		{hidden: 32, inter: 48, layers: 2, heads: 4, kv: 2, headDim: 8, vocab: 64, biases: true, innerNorms: true, seed: 11},
		{hidden: 32, inter: 64, layers: 2, heads: 4, kv: 1, headDim: 16, vocab: 80, tied: true, act: "gelu_pytorch_tanh", seed: 12},
		{hidden: 48, inter: 32, layers: 1, heads: 6, kv: 3, headDim: 8, vocab: 50, act: "relu2", seed: 13},
	} {
		dir := t.TempDir()
		src := m.write(t, dir)
		cfg := filepath.Join(dir, "config.json")
		if err := os.WriteFile(cfg, m.config(), 0o644); err != nil {
			t.Fatal(err)
		}
		art := packModel(t, src, pack.Base3, "model.layers.*.self_attn.*_proj.weight=ternary:row", "model.layers.*.mlp.*_proj.weight=ternary:group:16")
		arch := m.arch(t)
		seqs := RandomTokens(2, 12, m.vocab, m.seed)
		name := fmt.Sprintf("model %d (%s, tied %v)", m.seed, arch.Act, m.tied)

		sw, err := OpenSource(src)
		if err != nil {
			t.Fatal(err)
		}
		checks = append(checks, check{name + " source float32", m.vocab, runAlone(t, arch, sw, seqs), false})
		jobs = append(jobs, torchJob{Model: src, Config: cfg, Tokens: seqs})
		sw.Close()

		a, err := pack.Open(art)
		if err != nil {
			t.Fatal(err)
		}
		unpacked := filepath.Join(dir, "unpacked.safetensors")
		if err := pack.Unpack(a, unpacked, "F32"); err != nil {
			t.Fatal(err)
		}
		ternary := []string{}
		for _, e := range a.Tensors() {
			if e.Kind == manifest.KindTernary {
				ternary = append(ternary, e.Name)
			}
		}
		for _, act := range []string{ActFloat, ActInt8} {
			aw, err := NewArtifactWeights(a, art, act)
			if err != nil {
				t.Fatal(err)
			}
			job := torchJob{Model: unpacked, Config: cfg, Tokens: seqs}
			if act == ActInt8 {
				job.Ternary = ternary
			}
			checks = append(checks, check{name + " artifact, " + act + " activations", m.vocab, runAlone(t, arch, aw, seqs), true})
			jobs = append(jobs, job)
		}
		a.Close()
	}
	want := torchLogits(t, py, jobs)
	for i, c := range checks {
		rel, top1 := agree(t, c.what, c.got, want[i], c.vocab, tol)
		t.Logf("%s: relative difference %.2g, top-1 agreement %.3f", c.what, rel, top1)
		if c.top1 && top1 != 1 {
			t.Errorf("%s: top-1 agrees with torch at %.3f of positions, want all", c.what, top1)
		}
	}
}
