package verify

import (
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
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
			require.Empty(t, rep.Warnings)
		}
	}
}

func TestBudgetWarnsUnmatched(t *testing.T) {
	_, art := fixture(t, t.TempDir(), pack.Base3, nil)
	rep, err := Run(art, Options{Budget: &Budget{Limits: []Limit{{Match: "nothing.*", Metric: MaxRelRMSE, Value: 1}}}})
	require.NoError(t, err)
	require.True(t, rep.OK())
	require.Len(t, rep.Warnings, 1)
	require.Contains(t, rep.Warnings[0], "nothing.*")
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
		{`[[budget]]` + "\nmatch = \"*\"\nmin_cosine = -1", "min_cosine -1"},
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
