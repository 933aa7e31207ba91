package verify

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/modelconfig"
	"ternkit/pack"
)

// A budget verdict says its statistics were recomputed only when the
// source check of that tensor passed: a ternary tensor (re-quantized) or a
// converted kept tensor (compared) whose recorded statistics were edited,
// every hash rewritten to match, is judged on the manifest's claims.
func TestBudgetRecomputedOnlyWhenTheSourceCheckPassed(t *testing.T) {
	for _, name := range []string{"blocks.0.attn.q.weight", "blocks.0.norm.weight"} {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			src, art := fixtureWith(t, dir, pack.Base3, mixedPolicy(t), nil)
			out := filepath.Join(dir, "edited.tkart")
			editEntry(t, art, out, name, func(x map[string]any) {
				x["stats"].(map[string]any)["cosine"] = json.Number("0.25")
			})
			s, err := convert.Open(src)
			require.NoError(t, err)
			defer s.Close()
			anyCosine, err := ParseLimit(MinCosine, "-1")
			require.NoError(t, err)
			rep, err := Run(out, Options{Source: s, Budget: &Budget{Limits: []Limit{anyCosine}}})
			require.NoError(t, err)
			for _, tn := range []string{"blocks.0.attn.q.weight", "blocks.0.norm.weight"} {
				c, ok := rep.Find(CheckBudget, tn)
				require.True(t, ok, tn)
				require.NotNil(t, c.Recomputed, tn)
				edited := tn == name
				require.Equal(t, !edited, *c.Recomputed, "%s: %s", tn, c.Detail)
				require.Equal(t, edited, strings.HasSuffix(c.Detail, NotRecomputed), "%s: %s", tn, c.Detail)
			}
		})
	}
}

// An artifact that is what its source makes of it has one passing
// manifest_field check per tensor; a field that differs names the policy
// rule that decided the tensor, the first rule included.
func TestManifestFieldChecks(t *testing.T) {
	dir := t.TempDir()
	p := &convert.Policy{}
	for _, s := range []string{"*norm*=keep:f16", "*.q.weight=ternary:row", "*.down.weight=int8"} {
		r, err := convert.ParseRule(s)
		require.NoError(t, err)
		p.Rules = append(p.Rules, r)
	}
	src, art := fixtureWith(t, dir, pack.Base3, p, nil)
	rep := runAgainst(t, art, src)
	require.True(t, rep.OK(), "%v", failuresOf(rep))
	for _, name := range []string{"blocks.0.attn.q.weight", "blocks.0.norm.weight", "blocks.0.mlp.down.weight"} {
		c, ok := rep.Find(CheckManifestField, name)
		require.True(t, ok, name)
		require.True(t, c.OK, name)
	}

	// F16 recorded as BF16: the same size, a conversion the format lists
	out := filepath.Join(dir, "bf16.tkart")
	editEntry(t, art, out, "blocks.0.norm.weight", func(x map[string]any) { x["dtype"] = "BF16" })
	rep = runAgainst(t, out, src)
	var details []string
	for _, f := range rep.Failures() {
		if f.Name == CheckManifestField {
			details = append(details, f.Detail)
		}
	}
	require.Equal(t, []string{`dtype: manifest records "BF16", pack writes "F16" (policy rule 1: *norm* = keep:f16)`}, details)
}

// verify reads a config.json companion and warns about each mismatch with
// the tensors, naming key, tensor and both values (the test vector whose
// config contradicts its tensors); a config of exactly the size limit is
// still read.
func TestConfigCompanionChecked(t *testing.T) {
	rep, err := Run(filepath.Join("..", "testdata", "vectors", "ok-config-mismatch.tkart"), Options{})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%v", failuresOf(rep))
	require.Len(t, rep.Warnings, 1)
	require.Contains(t, rep.Warnings[0], `config vocab_size = 16, but tensor "model.embed_tokens.weight" has 12 rows`)

	dir := t.TempDir()
	src, _ := fixture(t, dir, pack.Base3, nil)
	cfg := filepath.Join(dir, "config.json")
	text := []byte(`{"hidden_size": 10}`)
	text = append(text, bytes.Repeat([]byte(" "), modelconfig.MaxSize-len(text))...)
	require.Len(t, text, modelconfig.MaxSize)
	require.NoError(t, os.WriteFile(cfg, text, 0o644))
	art := filepath.Join(dir, "limit.tkart")
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
		Companions: []pack.Companion{{Name: "config.json", Path: cfg}}})
	require.NoError(t, err)
	rep, err = Run(art, Options{})
	require.NoError(t, err)
	require.Empty(t, rep.Warnings, "a config at the limit is read, not refused")
	require.Len(t, rep.Notes, 1, "read: its tensors are of another layout, which a note says")
}

// The bound check names the tensor that comes closest to its bound: the
// largest excess beyond its tolerance, compared tensor by tensor.
func TestWorstBoundIsTheLargestExcessBeyondTolerance(t *testing.T) {
	var w worstBound
	w.note("a", 0.5e-6, 1e-6, 3)
	w.note("b", 1.0e-6, 1e-6, 4) // 0.5e-6 closer to its bound than a
	w.note("c", 0.9e-6, 1e-6, 5)
	w.note("d", 5, 1e-6, -1) // no element: not a candidate
	require.Equal(t, worstBound{tensor: "b", index: 4, excess: 1.0e-6, tolerance: 1e-6, seen: true}, w)
	w.note("e", 3e-6, 4e-6, 6) // a larger excess but a larger tolerance: farther from failing
	require.Equal(t, "b", w.tensor)
}
