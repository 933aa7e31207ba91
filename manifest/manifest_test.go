package manifest

import (
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

func validManifest() *Manifest {
	h := strings.Repeat("ab", 32)
	rel, maxErr := 0.5, 0.25
	m := &Manifest{
		Format: FormatName, Version: Version, Tool: "ternkit test", Recipe: convert.DefaultRecipe(),
		Source: Source{Files: []SourceFile{{Name: "m.safetensors", Bytes: 100, BLAKE3: h}}},
		Tensors: []Tensor{
			{Name: "w", Shape: []int64{3, 4}, SourceDType: "F32", Kind: KindTernary, Codec: CodecBase3, Scale: 0.5,
				Section: Section{Offset: 64, Length: 3, BLAKE3: h}, SourceBLAKE3: h,
				Trits: &convert.TritCounts{Neg: 4, Zero: 4, Pos: 4}, RelRMSE: &rel, MaxAbsErr: &maxErr},
			{Name: "b", Shape: []int64{4}, SourceDType: "BF16", Kind: KindKept, Codec: CodecRaw,
				Section: Section{Offset: 128, Length: 8, BLAKE3: h}, SourceBLAKE3: h},
		},
	}
	m.ComputeTotals()
	return m
}

func TestRoundTrip(t *testing.T) {
	m := validManifest()
	b, err := Encode(m)
	require.NoError(t, err)
	got, err := Decode(b)
	require.NoError(t, err)
	require.Equal(t, m, got)
	again, err := Encode(got)
	require.NoError(t, err)
	require.Equal(t, b, again)
	require.Equal(t, 8*3/12.0, got.Totals.BitsPerTernaryWeight) // 3 bytes for 12 trits
}

// The provenance keys survive a round trip and are written in the order
// pack/FORMAT.md gives: tool, created, recipe, source, policy, tensors.
func TestRoundTripProvenance(t *testing.T) {
	m := validManifest()
	// 1,700,000,000 s after the Unix epoch is 2023-11-14 22:13:20 UTC (common practice: date -u -d @1700000000).
	m.Created = CreatedAt(time.Unix(1_700_000_000, 0).In(time.FixedZone("east", 3600)))
	require.Equal(t, "2023-11-14T22:13:20Z", m.Created)
	m.Policy = []string{"keep name contains \"embed\"", "ternary 2-D float"}
	b, err := Encode(m)
	require.NoError(t, err)
	got, err := Decode(b)
	require.NoError(t, err)
	require.Equal(t, m, got)
	s := string(b)
	order := []string{`"tool":`, `"created":"2023-11-14T22:13:20Z"`, `"recipe":`, `"source":`, `"policy":["keep name contains \"embed\"","ternary 2-D float"]`, `"tensors":`}
	last := -1
	for _, key := range order {
		i := strings.Index(s, key)
		require.Greater(t, i, last, "%s after the previous key in %s", key, s)
		last = i
	}

	// An empty list is not a policy: writers leave the key out instead.
	_, err = Decode([]byte(strings.Replace(s, order[4], `"policy":[]`, 1)))
	require.ErrorIs(t, err, ErrInvalid)
	require.Contains(t, err.Error(), "empty list")

	// Without them, neither key appears.
	b, err = Encode(validManifest())
	require.NoError(t, err)
	require.NotContains(t, string(b), `"created"`)
	require.NotContains(t, string(b), `"policy"`)
}

func TestDecodeRejects(t *testing.T) {
	cases := []struct {
		name string
		edit func(m *Manifest)
		want string
	}{
		{"format", func(m *Manifest) { m.Format = "other" }, `"other"`},
		{"version", func(m *Manifest) { m.Version = 2 }, "version 2"},
		{"recipe", func(m *Manifest) { m.Recipe.Method = "absmax" }, `"absmax"`},
		{"duplicate name", func(m *Manifest) { m.Tensors[1].Name = "w" }, `duplicate tensor name "w"`},
		{"empty name", func(m *Manifest) { m.Tensors[0].Name = "" }, "empty name"},
		{"kind", func(m *Manifest) { m.Tensors[0].Kind = "binary" }, `"binary"`},
		{"codec", func(m *Manifest) { m.Tensors[0].Codec = "raw" }, `codec "raw"`},
		{"length", func(m *Manifest) { m.Tensors[0].Section.Length = 4 }, "section length 4"},
		{"kept length", func(m *Manifest) { m.Tensors[1].Section.Length = 6 }, "section length 6"},
		{"hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = "xyz" }, `"xyz"`},
		{"scale", func(m *Manifest) { m.Tensors[0].Scale = -1 }, "scale -1"},
		{"counts", func(m *Manifest) { m.Tensors[0].Trits.Pos = 5 }, "do not sum to 12"},
		{"negative shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{-4} }, "[-4]"},
		{"overflowing shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{1 << 40, 1 << 40} }, "overflows"},
		{"kept with scale", func(m *Manifest) { m.Tensors[1].Scale = 1 }, "ternary fields"},
		{"dtype", func(m *Manifest) { m.Tensors[1].SourceDType = "F12" }, `"F12"`},
		{"totals", func(m *Manifest) { m.Totals.TernaryParams++ }, "totals"},
		{"created not a time", func(m *Manifest) { m.Created = "yesterday" }, `"yesterday"`},
		{"created with offset", func(m *Manifest) { m.Created = "2026-01-02T03:04:05+01:00" }, "+01:00"},
		{"created with fraction", func(m *Manifest) { m.Created = "2026-01-02T03:04:05.5Z" }, ".5Z"},
		{"created out of range", func(m *Manifest) { m.Created = "2026-02-30T03:04:05Z" }, "02-30"},
		{"policy empty rule", func(m *Manifest) { m.Policy = []string{"keep *", ""} }, "rule 1 is empty"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m := validManifest()
			c.edit(m)
			b, err := Encode(m)
			require.NoError(t, err)
			_, err = Decode(b)
			require.ErrorIs(t, err, ErrInvalid)
			require.Contains(t, err.Error(), c.want)
		})
	}
}

func TestDecodeRejectsUnknownKeys(t *testing.T) {
	b, err := Encode(validManifest())
	require.NoError(t, err)
	for _, bad := range []string{
		strings.Replace(string(b), `"tool":`, `"toolz":1,"tool":`, 1),
		strings.Replace(string(b), `"tie":`, `"ties":1,"tie":`, 1),
		string(b) + "{}",
		"[]",
	} {
		_, err := Decode([]byte(bad))
		require.ErrorIs(t, err, ErrInvalid, bad)
	}
}

func FuzzDecode(f *testing.F) {
	b, err := Encode(validManifest())
	if err != nil {
		f.Fatal(err)
	}
	f.Add(b)
	f.Add([]byte(`{}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := Decode(b)
		if err != nil {
			return
		}
		again, err := Encode(m)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := Decode(again); err != nil {
			t.Fatalf("re-encoded manifest rejected: %v", err)
		}
	})
}
