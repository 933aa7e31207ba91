package main

import (
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/manifest"
	"ternkit/pack"
)

// requireIndependentFixtureValues checks the artifact TestPackIndependentFixture
// packs against values worked by hand, not against ternkit's own verify.
//
// layer.proj.weight holds v_i = (i mod 7) − 3.1 for i < 24: |v| cycles
// through 3.1 2.1 1.1 0.1 0.9 1.9 2.9 (sum 12.1), three full cycles and
// 3.1 2.1 1.1, so gamma = (3·12.1 + 6.3)/24 = 42.6/24 = 1.775 and a weight
// is nonzero when |v| > gamma/2 = 0.8875: the trits cycle − − − 0 + + +.
// layer.gate.weight holds 1, −2, 65504, 2^-14 (IEEE 754 binary16): gamma =
// 65507.00006.../4 ≈ 16376.75, and only 65504 (4 gamma) passes gamma/2.
// layer.norm.weight is kept as its binary16 bytes.
func requireIndependentFixtureValues(t *testing.T, art string, f16 []byte) {
	t.Helper()
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	cycle := []int8{-1, -1, -1, 0, 1, 1, 1}
	want := make([]int8, 24)
	for i := range want {
		want[i] = cycle[i%7]
	}
	cases := []struct {
		name  string
		trits []int8
		scale float64
	}{
		{"layer.proj.weight", want, 42.6 / 24},
		{"layer.gate.weight", []int8{0, 0, 1, 0}, (1 + 2 + 65504 + 1.0/16384) / 4},
	}
	for _, c := range cases {
		tn, err := a.Tensor(c.name)
		require.NoError(t, err)
		require.Equal(t, manifest.KindTernary, tn.Entry.Kind, c.name)
		got := make([]int8, tn.Len())
		require.NoError(t, tn.DecodeTrits(got))
		require.Equal(t, c.trits, got, c.name)
		// float32 roundings of gamma, its reciprocal and back: a few ulps
		require.InEpsilon(t, c.scale, tn.Entry.Scale, 1e-6, c.name)
	}
	norm, err := a.Tensor("layer.norm.weight")
	require.NoError(t, err)
	require.Equal(t, manifest.KindKept, norm.Entry.Kind)
	require.Equal(t, "F16", norm.Entry.DType)
	got, err := norm.VerifiedPayload()
	require.NoError(t, err)
	require.Equal(t, f16, got)
}
