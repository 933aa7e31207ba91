package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/verify"
)

// The vector whose config contradicts its tensors: verify warns, naming
// key, tensor and both values, and still passes (the bytes are sound).
// --strict, where the CLI has it, turns the warning into an error.
func TestVerifyConfigMismatchVector(t *testing.T) {
	vec := filepath.Join(vectorsDir, "ok-config-mismatch.tkart")
	code, out, errOut := ternkit("verify", vec)
	require.Equal(t, exitOK, code, out)
	require.Contains(t, errOut, `warning: config.json: config vocab_size = 16, but tensor "model.embed_tokens.weight" has 12 rows`)

	// --strict makes the warning an error (exit 2), after the report
	code, out, errOut = ternkit("verify", vec, "--strict")
	require.Equal(t, exitInput, code, out)
	require.Contains(t, out, "verify: ok")
	require.Contains(t, errOut, "--strict: 1 warning(s) are errors")
	require.Contains(t, errOut, "vocab_size = 16")

	code, out, _ = ternkit("verify", vec, "--json")
	require.Equal(t, exitOK, code, out)
	var rep verify.Report
	require.NoError(t, json.Unmarshal([]byte(out), &rep))
	require.Len(t, rep.Warnings, 1)
	require.Contains(t, rep.Warnings[0], "vocab_size")
}

// pack and verify cross-check the demo's config with its tensors: the
// demo's own config agrees; an edited one gives a warning per wrong key.
func TestConfigCrossCheck(t *testing.T) {
	dir := t.TempDir()
	code, out, errOut := ternkit("demo", "--dir", dir)
	require.Equal(t, exitOK, code, errOut)
	require.NotContains(t, out+errOut, "config.json:", "the demo's config agrees with its tensors")
	src := filepath.Join(dir, demoModel+".safetensors")

	cfg := filepath.Join(dir, "config.json")
	b, err := os.ReadFile(cfg)
	require.NoError(t, err)
	edited := strings.Replace(string(b), `"num_hidden_layers": 4`, `"num_hidden_layers": 6`, 1)
	edited = strings.Replace(edited, `"intermediate_size": 768`, `"intermediate_size": 1024`, 1)
	require.NoError(t, os.WriteFile(cfg, []byte(edited), 0o644))
	art := filepath.Join(t.TempDir(), "edited.tkart")
	code, _, errOut = ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, errOut, `warning: config.json: config intermediate_size = 1024, but tensor "model.layers.0.mlp.gate_proj.weight" has 768 rows (and 11 more tensors)`)
	require.Contains(t, errOut, `warning: config.json: config num_hidden_layers = 6, but tensor "model.layers.3.*" has the highest layer index 3 (4 layers)`)

	code, out, errOut = ternkit("verify", art)
	require.Equal(t, exitOK, code, out)
	require.Equal(t, 2, strings.Count(errOut, "warning: config.json: config "), errOut)

	// a wrong config shipped with the weights stops a strict pack: exit 2,
	// nothing written
	strict := filepath.Join(t.TempDir(), "strict.tkart")
	code, _, errOut = ternkit("pack", src, "-o", strict, "--strict")
	require.Equal(t, exitInput, code, errOut)
	require.Contains(t, errOut, "intermediate_size = 1024")
	require.NoFileExists(t, strict)

	// a config of another layout: not checked, said once
	require.NoError(t, os.WriteFile(cfg, []byte(`{"n_embd": 256}`), 0o644))
	code, _, errOut = ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, 1, strings.Count(errOut, "note: config.json sets no architecture key"), errOut)
	require.NotContains(t, errOut, "warning: config.json")
}
