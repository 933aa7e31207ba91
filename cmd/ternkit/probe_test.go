package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestProbeCommand(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir, "-q")
	cfg := filepath.Join(dir, "config.json")

	code, out, errOut := ternkit("probe", art, "--against", src)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "2 random sequences × 32 tokens (seed 1), int8 activations")
	require.Contains(t, out, "top-1 agreement")
	require.Contains(t, errOut, "smoke test, not an evaluation")

	// JSON: one object, the comparison's keys
	code, out, _ = ternkit("probe", art, "--against", src, "--json", "--seqs", "1", "--len", "8")
	require.Equal(t, exitOK, code)
	var doc map[string]any
	require.NoError(t, json.Unmarshal([]byte(out), &doc))
	for _, k := range []string{"artifact", "source", "config", "ok", "compared", "layers", "mean_kl", "max_kl", "top1_agreement", "top5_overlap", "positions"} {
		require.Contains(t, doc, k)
	}
	require.Len(t, doc["layers"], demoLayers)

	// a broken budget exits 1 and names the metric
	code, out, _ = ternkit("probe", art, "--against", src, "--min-top1", "1.0", "--max-kl", "0")
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, "FAIL top-1 agreement")
	require.Contains(t, out, "FAIL mean KL")

	// text tokens give each model's NLL and the loss budget
	tokens := filepath.Join(dir, "ids.txt")
	require.NoError(t, os.WriteFile(tokens, []byte("5 17 300 2047 9\n12 12 12\n"), 0o644))
	code, out, _ = ternkit("probe", art, "--against", src, "--tokens", tokens, "--max-loss-increase", "100")
	require.Equal(t, exitOK, code, out)
	require.Contains(t, out, "NLL (nats per token): artifact")
	require.NoError(t, os.WriteFile(tokens, []byte("5 2048\n"), 0o644))
	code, _, errOut = ternkit("probe", art, "--against", src, "--tokens", tokens)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "id 2048, outside the vocabulary 0..2047")

	// golden outputs: written, checked, a changed logit fails
	golden := filepath.Join(dir, "golden.json")
	code, _, errOut = ternkit("probe", art, "--config", cfg, "--golden", golden, "--seqs", "1", "--len", "6")
	require.Equal(t, exitOK, code, errOut)
	code, out, errOut = ternkit("probe", art, "--config", cfg, "--check", golden)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "6 positions match")
	data, err := os.ReadFile(golden)
	require.NoError(t, err)
	var g map[string]any
	require.NoError(t, json.Unmarshal(data, &g))
	pos := g["positions"].([]any)[0].([]any)[2].(map[string]any)
	logits := pos["logits"].([]any)
	logits[1] = logits[1].(float64) + 0.5
	data, err = json.Marshal(g)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(golden, data, 0o644))
	code, out, _ = ternkit("probe", art, "--config", cfg, "--check", golden)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, "sequence 0 position 2")

	// the config comes from the artifact's companion by default; an
	// artifact without one needs --config or a source with one beside it
	code, out, errOut = ternkit("probe", art, "--seqs", "1", "--len", "4")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "config "+art+":config.json")
	bare := filepath.Join(dir, "bare.tkart")
	code, _, errOut = ternkit("pack", src, "-o", bare, "--no-companions", "-q")
	require.Equal(t, exitOK, code, errOut)
	code, _, errOut = ternkit("probe", bare)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "no model config")
	code, out, errOut = ternkit("probe", bare, "--against", src, "--seqs", "1", "--len", "4")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "config "+cfg)

	// a config the weights do not fit
	bad := filepath.Join(dir, "bad.json")
	c, err := os.ReadFile(cfg)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(bad, []byte(strings.Replace(string(c), `"num_hidden_layers": 4`, `"num_hidden_layers": 3`, 1)), 0o644))
	code, _, errOut = ternkit("probe", art, "--config", bad)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `"model.layers.3.input_layernorm.weight" has no place in the layout`)
	require.Contains(t, errOut, "integer and BOOL tensors are ignored")
	code, _, errOut = ternkit("probe", art, "--config", cfg, "--activations", "int4")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `--activations "int4"`)
}

func TestDemoRunsProbe(t *testing.T) {
	code, out, errOut := ternkit("demo", "--dir", t.TempDir())
	require.Equal(t, exitOK, code, errOut)
	require.Regexp(t, `probe \S+\.tkart against \S+\.safetensors: 2 random sequences × 32 tokens`, out)
	require.Contains(t, out, "logits: mean KL")
}
