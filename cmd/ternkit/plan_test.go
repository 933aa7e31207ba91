package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/manifest"
	"ternkit/report"
)

// pack --plan projects each tensor's action and bytes from the headers:
// exactly the bytes pack then writes for fixed-size codecs, at most them
// for auto; it reads no weight and writes nothing.
func TestPackPlan(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	pol := filepath.Join(dir, demoModel+".policy.toml")
	before := dirNames(t, dir)
	for _, codec := range []string{"base3", "bits2", "auto"} {
		code, out, errOut := ternkit("pack", src, "--plan", "--json", "--policy", pol, "--codec", codec)
		require.Equal(t, exitOK, code, errOut)
		var plan packPlan
		require.NoError(t, json.Unmarshal([]byte(out), &plan))
		require.Equal(t, before, dirNames(t, dir), "the plan writes nothing")

		art := filepath.Join(t.TempDir(), "a.tkart")
		code, _, errOut = ternkit("pack", src, "-o", art, "--policy", pol, "--codec", codec)
		require.Equal(t, exitOK, code, errOut)
		m := manifestOf(t, art)
		require.Equal(t, m.Policy, plan.Policy)
		require.Len(t, plan.Tensors, len(m.Tensors))
		var total int64
		for i, e := range m.Tensors {
			p := plan.Tensors[i]
			require.Equal(t, e.Name, p.Name)
			require.Equal(t, e.Kind, p.Kind, e.Name)
			require.Equal(t, e.SourceDType, p.SourceDType, e.Name)
			if e.Granularity != nil {
				require.Equal(t, e.Granularity.String(), p.Granularity, e.Name)
			}
			if codec == "auto" && e.Kind == "ternary" {
				require.LessOrEqual(t, e.StoredBytes(), p.Bytes, e.Name)
			} else {
				require.Equal(t, e.StoredBytes(), p.Bytes, "%s %s", codec, e.Name)
			}
			total += e.StoredBytes()
		}
		require.Equal(t, m.Totals.TernaryTensors, plan.Totals.TernaryTensors)
		require.Equal(t, m.Totals.Int8Tensors, plan.Totals.Int8Tensors)
		require.Equal(t, m.Totals.KeptTensors, plan.Totals.KeptTensors)
		require.Equal(t, m.Totals.TernaryParams, plan.Totals.TernaryParams)
		var tensorBytes int64
		for _, p := range plan.Tensors {
			tensorBytes += p.SourceBytes
		}
		require.Equal(t, tensorBytes, plan.Totals.SourceBytes)
		require.Less(t, plan.Totals.SourceBytes, m.Totals.SourceBytes, "the file also holds its header")
		if codec != "auto" {
			require.Equal(t, total, plan.Totals.Bytes)
			require.InDelta(t, m.Totals.BitsPerTernaryWeight, plan.Totals.BitsPerTernary, 1e-9)
		}
	}

	code, out, errOut := ternkit("pack", src, "--plan", "--policy", pol)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "dry run")
	// The rows of the first row-scaled ternary tensor and of the first
	// tensor kept as F16, whatever the demo names them: n trits in base3
	// take ceil(n/5) bytes, plus 4 bytes per row scale; F16 is 2 bytes a value.
	m := manifestOf(t, filepath.Join(dir, demoModel+".tkart"))
	var rowT, f16T *manifest.Tensor
	for i := range m.Tensors {
		e := &m.Tensors[i]
		if rowT == nil && e.Kind == manifest.KindTernary && e.Granularity != nil && e.Granularity.String() == "row" {
			rowT = e
		}
		if f16T == nil && e.Kind == manifest.KindKept && e.DType == "F16" && e.SourceDType == "BF16" {
			f16T = e
		}
	}
	require.NotNil(t, rowT)
	require.NotNil(t, f16T)
	n, rows := manifest.NumElements(rowT.Shape), rowT.Shape[0]
	require.Regexp(t, fmt.Sprintf(`%s\s+%s\s+BF16\s+ternary:row\s+row\s+auto\s+\d+\s+%d\s+%d\n`,
		regexp.QuoteMeta(rowT.Name), regexp.QuoteMeta(report.FormatShape(rowT.Shape)), 2*n, (n+4)/5+4*rows), out)
	nf := manifest.NumElements(f16T.Shape)
	require.Regexp(t, fmt.Sprintf(`%s\s+%s\s+BF16\s+keep:f16\s+-\s+raw\s+\d+\s+%d\s+%d\n`,
		regexp.QuoteMeta(f16T.Name), regexp.QuoteMeta(report.FormatShape(f16T.Shape)), 2*nf, 2*nf), out)
	require.Contains(t, out, fmt.Sprintf("tensors    %d (%d ternary, %d int8, %d kept)",
		m.Totals.Tensors, m.Totals.TernaryTensors, m.Totals.Int8Tensors, m.Totals.KeptTensors))

	// Headers only: a NaN weight stops pack, not the plan.
	w := make([]float32, 4*8)
	w[5] = float32(math.NaN())
	nan := writeFixture(t, t.TempDir(), map[string][]float32{"layer.proj.weight": w}, map[string][]uint64{"layer.proj.weight": {4, 8}})
	code, _, errOut = ternkit("pack", nan, "--plan")
	require.Equal(t, exitOK, code, errOut)
	code, _, _ = ternkit("pack", nan, "-o", filepath.Join(t.TempDir(), "x.tkart"))
	require.Equal(t, exitInput, code)

	// Usage: --plan with -o or with --print-policy; strict on an unmatched rule.
	code, _, errOut = ternkit("pack", src, "--plan", "-o", filepath.Join(dir, "x.tkart"))
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "--plan writes nothing")
	code, _, _ = ternkit("pack", "--plan", "--print-policy")
	require.Equal(t, exitInput, code)
	code, out, errOut = ternkit("pack", src, "--plan", "--json", "--rule", "nothing.*=int8", "--strict")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `rule "nothing.* = int8" matches no tensor`)
	require.Contains(t, out, `"warnings": [`)
	_, err := os.Stat(filepath.Join(dir, "x.tkart"))
	require.ErrorIs(t, err, os.ErrNotExist)
}
