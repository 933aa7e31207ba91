package main

import (
	"encoding/json"
	"fmt"
	"os"
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
	require.Equal(t, "*mlp.down* = keep; *embed* = keep; *lm_head* = keep; * (2-D, F64|F32|F16|BF16) = ternary; * = keep", r.Provenance[0].B)
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
	require.Contains(t, out, "model.layers.3.mlp.down_proj.weight: kind ternary -> kept; codec base3 -> raw; stored dtype none -> BF16; granularity tensor -> none; bytes ")
	require.Contains(t, out, "  policy: the rules differ\n    + *mlp.down* = keep\n    was: *embed* = keep; *lm_head* = keep; * (2-D, F64|F32|F16|BF16) = ternary; * = keep\n    now: *mlp.down* = keep; *embed*")
	require.Contains(t, out, "compared: section bytes (BLAKE3 of each section as read from both files) and the manifests' records; trits not decoded")
	require.NotContains(t, out, "scale ", "no scale to show when the tensor is no longer ternary")
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
	opts.PolicyRules = opts.Policy.Describe()
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

// diff as a gate: each --fail-on condition exits 1 exactly when it holds;
// a section changed after packing is seen and exits 1; a bad condition is
// a usage error with a suggestion.
func TestDiffGate(t *testing.T) {
	dir := t.TempDir()
	src, a := demoArtifact(t, dir)
	pol := filepath.Join(dir, demoModel+".policy.toml")
	b := filepath.Join(dir, "b.tkart")
	// B scales the first row-scaled tensor per tensor instead
	ma := manifestOf(t, a)
	q := ""
	for _, e := range ma.Tensors {
		if e.Kind == manifest.KindTernary && e.Granularity != nil && e.Granularity.String() == "row" {
			q = e.Name
			break
		}
	}
	require.NotEmpty(t, q, "the demo has a row-scaled tensor")
	t.Setenv("SOURCE_DATE_EPOCH", "1700000000")
	code, _, errOut := ternkit("pack", src, "-o", b, "--policy", pol, "--rule", q+"=ternary")
	require.Equal(t, exitOK, code, errOut)
	t.Setenv("SOURCE_DATE_EPOCH", "")

	for _, c := range []struct {
		conds []string
		code  int
		want  string
	}{
		{[]string{"removed", "added", "reshaped", "kind"}, exitOK, "diff: no --fail-on condition holds (4 checked)"},
		{[]string{"rel_rmse=0.5", "cosine=0.5", "zero_fraction=0.5"}, exitOK, "no --fail-on condition holds"},
		{[]string{"scale=0.1"}, exitFailed, "FAIL scale=0.1: " + q + " (scales not comparable: granularity row -> tensor)"},
		{[]string{"rel_rmse=0.0001"}, exitFailed, "FAIL rel_rmse=0.0001: " + q + " (rel_rmse "},
		{[]string{"trits"}, exitFailed, "FAIL trits: "},
		{[]string{"sections"}, exitFailed, "FAIL sections: 1 tensor(s) with different section bytes"},
		{[]string{"any"}, exitFailed, "FAIL any: the artifacts differ"},
	} {
		args := []string{"diff", a, b}
		for _, f := range c.conds {
			args = append(args, "--fail-on", f)
		}
		code, out, errOut := ternkit(args...)
		require.Equal(t, c.code, code, "%v\n%s%s", c.conds, out, errOut)
		require.Contains(t, out, c.want, c.conds)
		require.Contains(t, out, "  created: (none) -> 2023-11-14T22:13:20Z", "an absent value is written (none)")

		code, out, _ = ternkit(append(args, "--json")...)
		require.Equal(t, c.code, code)
		var r struct {
			OK       bool     `json:"ok"`
			FailOn   []string `json:"fail_on"`
			Failures []string `json:"failures"`
		}
		require.NoError(t, json.Unmarshal([]byte(out), &r))
		require.Equal(t, c.code == exitOK, r.OK)
		require.Equal(t, c.conds, r.FailOn)
		require.Equal(t, c.code != exitOK, len(r.Failures) > 0)

		code, out, errOut = ternkit(append(args, "-q")...)
		require.Equal(t, c.code, code)
		require.Empty(t, out, "-q")
		if c.code == exitOK {
			require.Empty(t, errOut)
		} else {
			require.Contains(t, errOut, "FAIL ")
		}
	}

	// trits: counted only when asked, and said so
	_, out, _ := ternkit("diff", a, b)
	require.Contains(t, out, "trits not decoded (--trits counts them)")
	require.Contains(t, out, q+": granularity row -> tensor; rel_rmse ")
	_, out, _ = ternkit("diff", a, b, "--trits")
	require.Regexp(t, fmt.Sprintf(`trits differ \d+\.\d\d%% \(\d+ of %d compared\)`, ma.Totals.TernaryParams), out)

	// a byte changed after packing: the manifest is the same, the bytes are not
	raw := readFile(t, a)
	m := manifestOf(t, a)
	raw[m.Tensors[3].Section.Offset+10] ^= 0x01
	flipped := filepath.Join(dir, "flipped.tkart")
	require.NoError(t, os.WriteFile(flipped, raw, 0o644))
	code, out, _ = ternkit("diff", a, flipped)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, m.Tensors[3].Name+": section bytes differ")
	require.Contains(t, out, "MISMATCH")
	require.NotContains(t, out, "no differences")

	code, _, errOut = ternkit("diff", a, b, "--fail-on", "trit")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `did you mean "trits"?`)
	code, _, errOut = ternkit("diff", a, b, "--fail-on", "scale")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "needs a value")
}
