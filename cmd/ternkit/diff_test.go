package main

import (
	"encoding/json"
	"fmt"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/diff"
	"ternkit/manifest"
	"ternkit/pack"
)

// Two demo releases, the second with a policy that also keeps the MLP down
// projections: diff lists exactly the policy and those tensors.
func TestDiffDemoReleases(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	first, second := filepath.Join(dir, "first.tkart"), filepath.Join(dir, "second.tkart")
	packKeepingAlso(t, src, first, "")
	packKeepingAlso(t, src, second, "mlp.down")

	code, out, errOut := ternkit("diff", first, second, "--json")
	require.Equal(t, exitOK, code, errOut)
	var r diff.Report
	require.NoError(t, json.Unmarshal([]byte(out), &r))
	require.Len(t, r.Provenance, 1)
	require.Equal(t, "policy", r.Provenance[0].Field)
	require.Empty(t, r.Added)
	require.Empty(t, r.Removed)
	require.Empty(t, r.Reshaped)
	require.Len(t, r.Changed, demoLayers)
	for i, c := range r.Changed {
		require.Equal(t, fmt.Sprintf("model.layers.%d.mlp.down_proj.weight", i), c.Name)
		require.Equal(t, []string{diff.AspectKind, diff.AspectCodec, diff.AspectStored, diff.AspectGran, diff.AspectScale, diff.AspectBytes}, c.Changed)
		require.Equal(t, manifest.KindTernary, c.KindA)
		require.Equal(t, manifest.KindKept, c.KindB)
		require.Equal(t, int64((demoFFN*demoWidth+4)/5), c.BytesA, "base3: 5 trits per byte")
		require.Equal(t, int64(2*demoFFN*demoWidth), c.BytesB, "BF16 source bytes")
	}
	require.Equal(t, r.Totals.TensorsA-demoLayers, r.Totals.Unchanged, "all but the down projections")
	require.Zero(t, r.Totals.TritsDiffer)

	code, out, _ = ternkit("diff", first, second)
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "model.layers.3.mlp.down_proj.weight: kind ternary -> kept; codec base3 -> raw")
	require.Contains(t, out, fmt.Sprintf("0 added, 0 removed, 0 reshaped, 4 changed, %d unchanged", r.Totals.Unchanged))
	require.NotContains(t, out, "attn.q")

	code, out, _ = ternkit("diff", first, first)
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "no differences")

	code, _, errOut = ternkit("diff", first, filepath.Join(dir, "missing.tkart"))
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "missing.tkart")
}

// packKeepingAlso packs src to out as pack does, with a policy that also
// keeps the tensors whose names contain substr (unless it is ""), and
// records that rule.
func packKeepingAlso(t *testing.T, src, out, substr string) {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	opts := packOptions(t)
	if substr == "" {
		_, err = pack.Build(s, out, opts)
		require.NoError(t, err)
		return
	}
	keep, err := convert.ParseRule("*" + substr + "*=keep")
	require.NoError(t, err)
	opts.Policy = &convert.Policy{Rules: append([]convert.Rule{keep}, opts.Policy.Rules...)}
	opts.PolicyRules = opts.Policy.Describe()
	_, err = pack.Build(s, out, opts)
	require.NoError(t, err)
}
