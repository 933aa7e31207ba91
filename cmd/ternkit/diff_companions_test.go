package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/diff"
)

// Two releases of the demo whose config changed (a key changed, one added)
// and whose second adds a licence: diff names the companions and keys.
func TestDiffCompanions(t *testing.T) {
	dir := t.TempDir()
	src, first := demoArtifact(t, dir)
	cfg := filepath.Join(dir, "config.json")
	b, err := os.ReadFile(cfg)
	require.NoError(t, err)
	b = []byte(strings.Replace(string(b), `"max_position_embeddings": 512`, `"max_position_embeddings": 1024, "rope_scaling": null`, 1))
	require.NoError(t, os.WriteFile(cfg, b, 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "LICENSE"), []byte("Fernmoss Seed Vault: internal use.\n"), 0o644))
	second := filepath.Join(t.TempDir(), "second.tkart")
	code, out, errOut := ternkit("pack", src, "-o", second, "--quiet")
	require.Equal(t, exitOK, code, out+errOut)

	code, out, errOut = ternkit("diff", first, second, "--json")
	require.Equal(t, exitOK, code, errOut)
	var r diff.Report
	require.NoError(t, json.Unmarshal([]byte(out), &r))
	require.Len(t, r.Companions, 2)
	require.Equal(t, diff.CompanionChange{Name: "LICENSE", Change: diff.CompanionAdded, BytesB: 35}, r.Companions[0])
	require.Equal(t, "config.json", r.Companions[1].Name)
	require.Equal(t, diff.CompanionChanged, r.Companions[1].Change)
	require.Equal(t, []string{"max_position_embeddings", "rope_scaling"}, r.Companions[1].Keys)
	require.False(t, r.Same())

	code, out, _ = ternkit("diff", first, second)
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "companions (2):\n  + LICENSE, 35 bytes\n  ~ config.json, ")
	require.Contains(t, out, `keys changed: "max_position_embeddings", "rope_scaling"`+"\n")
}
