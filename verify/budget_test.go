package verify

import (
	"encoding/json"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/pack"
)

func TestBudgetEachMetric(t *testing.T) {
	_, art := fixture(t, t.TempDir(), pack.Base3, nil)
	a, err := pack.Open(art)
	require.NoError(t, err)
	st := *a.Manifest().Tensors[0].Stats // blocks.0.attn.q.weight
	a.Close()
	value := map[string]float64{MaxRelRMSE: st.RelRMSE, MinCosine: st.Cosine, MaxClipped: st.ClippedFraction, MaxAbsError: st.MaxAbsErr}
	for _, metric := range Metrics {
		v := value[metric]
		require.Greater(t, v, 0.0, metric)
		loose, tight := v*1.01, v*0.99
		if metric == MinCosine {
			loose, tight = tight, loose
		}
		for _, c := range []struct {
			limit float64
			pass  bool
		}{{loose, true}, {tight, false}} {
			b := &Budget{Limits: []Limit{{Match: "blocks.0.attn.q.weight", Metric: metric, Value: c.limit}}}
			rep, err := Run(art, Options{Budget: b})
			require.NoError(t, err)
			require.Equal(t, c.pass, rep.OK(), "%s limit %v (value %v)", metric, c.limit, v)
			got, ok := rep.Find(CheckBudget, "blocks.0.attn.q.weight")
			require.True(t, ok)
			require.Equal(t, c.pass, got.OK)
			if !c.pass {
				require.Contains(t, got.Detail, metric)
				require.Contains(t, got.Detail, "limit")
			}
			require.Equal(t, []string{`tensor "blocks.0.mlp.down.weight" has statistics that no budget covers`}, rep.Warnings)
		}
	}
}

func TestBudgetWarnsUnmatched(t *testing.T) {
	_, art := fixture(t, t.TempDir(), pack.Base3, nil)
	rep, err := Run(art, Options{Budget: &Budget{Limits: []Limit{{Match: "nothing.*", Metric: MaxRelRMSE, Value: 1}}}})
	require.NoError(t, err)
	require.True(t, rep.OK())
	require.Equal(t, []string{
		"budget nothing.* max_rel_rmse 1 matches no tensor with statistics",
		`tensor "blocks.0.attn.q.weight" has statistics that no budget covers`,
		`tensor "blocks.0.mlp.down.weight" has statistics that no budget covers`,
	}, rep.Warnings)
}

func TestParseBudget(t *testing.T) {
	b, err := ParseBudget("b.toml", []byte(`
[[budget]]
match = "blocks.*"
min_cosine = 0.8
max_rel_rmse = 0.6

[[budget]]
match = "*"
max_clipped = 1
`))
	require.NoError(t, err)
	require.Equal(t, []Limit{
		{Match: "blocks.*", Metric: MaxRelRMSE, Value: 0.6},
		{Match: "blocks.*", Metric: MinCosine, Value: 0.8},
		{Match: "*", Metric: MaxClipped, Value: 1},
	}, b.Limits)
	bad := []struct{ text, want string }{
		{`[[budget]]` + "\nmatch = \"*\"\nmax_rmse = 1", `unknown key "max_rmse"`},
		{`[[budget]]` + "\nmax_rel_rmse = 1", "match must be"},
		{`[[budget]]` + "\nmatch = \"*\"", "sets no limit"},
		{`[[budget]]` + "\nmatch = \"*\"\nmin_cosine = \"high\"", "must be a number"},
		{`[[budget]]` + "\nmatch = \"[\"\nmin_cosine = 0.5", `glob "["`},
		{`[[budget]]` + "\nmatch = \"*\"\nmin_cosine = -1.5", "min_cosine -1.5 is not a cosine, in [-1, 1]"},
		{`[[budget]]` + "\nmatch = \"*\"\nmin_cosine = 2", "min_cosine 2 is not a cosine"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_clipped = 1.5", "max_clipped 1.5 is not a fraction, in [0, 1]"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_clipped = -0.1", "max_clipped -0.1 is not a fraction"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_rel_rmse = -0.1", "max_rel_rmse -0.1 is not a finite number ≥ 0"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_abs_err = -1", "max_abs_err -1 is not a finite number ≥ 0"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_abs_err = inf", "max_abs_err +Inf"},
		{`[[budget]]` + "\nmatch = \"*\"\nmax_abs_err = nan", "max_abs_err NaN"},
		{`other = 1`, `unknown key "other"`},
		{`# empty`, "no [[budget]]"},
		{`[[budget]`, "b.toml"},
	}
	for _, c := range bad {
		_, err := ParseBudget("b.toml", []byte(c.text))
		require.ErrorIs(t, err, ErrBudget, c.text)
		require.Contains(t, err.Error(), c.want, c.text)
	}
}

func TestParseLimit(t *testing.T) {
	l, err := ParseLimit(MaxRelRMSE, "0.5")
	require.NoError(t, err)
	require.Equal(t, Limit{Match: "*", Metric: MaxRelRMSE, Value: 0.5}, l)
	l, err = ParseLimit(MinCosine, "blocks.*=0.9")
	require.NoError(t, err)
	require.Equal(t, Limit{Match: "blocks.*", Metric: MinCosine, Value: 0.9}, l)
	for _, s := range []string{"", "x", "blocks.*=", "=0.5", "*=NaN", "*=-2"} {
		_, err := ParseLimit(MaxClipped, s)
		require.ErrorIs(t, err, ErrBudget, s)
	}
	_, err = ParseLimit("max_fun", "1")
	require.ErrorIs(t, err, ErrBudget)
}

func FuzzParseBudget(f *testing.F) {
	f.Add([]byte("[[budget]]\nmatch = \"*\"\nmax_rel_rmse = 0.5\n"))
	f.Add([]byte("[[budget]]\nmatch = \"a*\"\nmin_cosine = 1\nmax_abs_err = 2\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		budget, err := ParseBudget("fuzz", b)
		if err != nil {
			return
		}
		for _, l := range budget.Limits {
			if err := l.validate(); err != nil {
				t.Fatalf("accepted an invalid limit %v: %v", l, err)
			}
			_, _ = l.check(convert.Stats{})
		}
	})
}

// One glob for budgets: '*' crosses '/', so a tensor named like a path is
// judged by a limit for every tensor; a tensor no limit covers is a
// warning; a verdict without the source says its statistics were not
// recomputed, and with the source that they were.
func TestBudgetCoversPathLikeNames(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(9, 10))
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "model/dense_1/kernel", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
		{Name: "model/dense_2/kernel", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)

	all, err := ParseLimit(MaxRelRMSE, "0.1") // ternarized Gaussian weights: about 0.51
	require.NoError(t, err)
	rep, err := Run(art, Options{Budget: &Budget{Limits: []Limit{all}}})
	require.NoError(t, err)
	require.False(t, rep.OK())
	for _, name := range []string{"model/dense_1/kernel", "model/dense_2/kernel"} {
		c, ok := rep.Find(CheckBudget, name)
		require.True(t, ok, name)
		require.False(t, c.OK)
		require.Contains(t, c.Detail, "beyond the limit 0.1")
		require.True(t, strings.HasSuffix(c.Detail, NotRecomputed), c.Detail)
		require.NotNil(t, c.Recomputed)
		require.False(t, *c.Recomputed)
	}

	one, err := ParseLimit(MaxRelRMSE, "model/*_1/*=0.9")
	require.NoError(t, err)
	rep, err = Run(art, Options{Budget: &Budget{Limits: []Limit{one}}, Source: s})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%v", rep.Failures())
	c, ok := rep.Find(CheckBudget, "model/dense_1/kernel")
	require.True(t, ok)
	require.True(t, c.OK)
	require.True(t, *c.Recomputed, "checked against the source")
	require.Empty(t, c.Detail)
	require.Equal(t, []string{`tensor "model/dense_2/kernel" has statistics that no budget covers`}, rep.Warnings)
	b, err := json.Marshal(c)
	require.NoError(t, err)
	require.Contains(t, string(b), `"recomputed":true`)
}
