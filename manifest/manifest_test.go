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
	tensor, row := convert.PerTensor, convert.Granularity{Kind: convert.GranRow}
	m := &Manifest{
		Format: FormatName, Version: Version, Tool: "ternkit test", Recipe: convert.DefaultRecipe(),
		Source: Source{Files: []SourceFile{{Name: "m.safetensors", Bytes: 100, BLAKE3: h}}},
		Tensors: []Tensor{
			{Name: "w", Shape: []int64{3, 4}, SourceDType: "F32", Kind: KindTernary, Codec: CodecBase3, Scale: 0.5,
				Section: Section{Offset: 64, Length: 3, BLAKE3: h}, SourceBLAKE3: h,
				Granularity: &tensor, Trits: &convert.TritCounts{Neg: 4, Zero: 4, Pos: 4}, Stats: &convert.Stats{RelRMSE: 0.5}},
			{Name: "b", Shape: []int64{4}, SourceDType: "BF16", Kind: KindKept, DType: "BF16", Codec: CodecRaw,
				Section: Section{Offset: 128, Length: 8, BLAKE3: h}, SourceBLAKE3: h},
			{Name: "r", Shape: []int64{2, 6}, SourceDType: "F32", Kind: KindTernary, Codec: CodecBits2,
				Section: Section{Offset: 192, Length: 3, BLAKE3: h}, Scales: &Section{Offset: 256, Length: 8, BLAKE3: h},
				SourceBLAKE3: h, Granularity: &row, Trits: &convert.TritCounts{Zero: 12}, Stats: &convert.Stats{}},
			{Name: "e", Shape: []int64{3, 2}, SourceDType: "F16", Kind: KindInt8, Codec: CodecRaw,
				Section: Section{Offset: 320, Length: 6, BLAKE3: h}, Scales: &Section{Offset: 384, Length: 12, BLAKE3: h},
				SourceBLAKE3: h, Granularity: &row, Stats: &convert.Stats{}},
			{Name: "n", Shape: []int64{4}, SourceDType: "F32", Kind: KindKept, DType: "F16", Codec: CodecRaw,
				Section: Section{Offset: 448, Length: 8, BLAKE3: h}, SourceBLAKE3: h, Stats: &convert.Stats{}},
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
	// 3 + 3 payload bytes and 8 scale bytes for 24 trits
	require.Equal(t, 8*14/24.0, got.Totals.BitsPerTernaryWeight)
	require.Equal(t, 1, got.Totals.Int8Tensors)
	require.Equal(t, int64(18), got.Totals.Int8SectionBytes)
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
		{"entropy too short", func(m *Manifest) { m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, 8 }, "takes 10 to 19 bytes"},
		{"entropy frame claiming more than its blocks can hold", func(m *Manifest) {
			m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, 9
		}, "takes 10 to 19 bytes"},
		{"entropy too long", func(m *Manifest) { m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, 20 }, "section length 20"},
		{"kept length", func(m *Manifest) { m.Tensors[1].Section.Length = 6 }, "section length 6"},
		{"hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = "xyz" }, `"xyz"`},
		{"scale", func(m *Manifest) { m.Tensors[0].Scale = -1 }, "scale -1"},
		{"counts", func(m *Manifest) { m.Tensors[0].Trits.Pos = 5 }, "do not sum to 12"},
		{"negative shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{-4} }, "[-4]"},
		{"overflowing shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{1 << 40, 1 << 40} }, "overflows"},
		{"kept with scale", func(m *Manifest) { m.Tensors[1].Scale = 1 }, "ternary fields"},
		{"dtype", func(m *Manifest) { m.Tensors[1].DType = "F12" }, `"F12"`},
		{"kept without dtype", func(m *Manifest) { m.Tensors[1].DType = "" }, "without dtype"},
		{"converted without stats", func(m *Manifest) { m.Tensors[4].Stats = nil }, "stats are required"},
		{"raw with stats", func(m *Manifest) { m.Tensors[1].Stats = &convert.Stats{} }, "stats are required"},
		{"converted to an integer dtype", func(m *Manifest) { m.Tensors[4].DType, m.Tensors[4].Section.Length = "I16", 8 }, `to "I16"`},
		{"converted from an integer dtype", func(m *Manifest) { m.Tensors[4].SourceDType = "I32" }, `from "I32"`},
		{"no granularity", func(m *Manifest) { m.Tensors[0].Granularity = nil }, "missing granularity"},
		{"row with one scale", func(m *Manifest) { m.Tensors[2].Scale = 1 }, "single scale"},
		{"row without scales", func(m *Manifest) { m.Tensors[2].Scales = nil }, "without a scales section"},
		{"scales length", func(m *Manifest) { m.Tensors[2].Scales.Length = 4 }, "scales length 4"},
		{"tensor with scales", func(m *Manifest) {
			m.Tensors[0].Scales = &Section{Offset: 0, Length: 4, BLAKE3: m.Tensors[0].Section.BLAKE3}
		}, "scales section"},
		{"group not dividing", func(m *Manifest) { m.Tensors[2].Granularity = &convert.Granularity{Kind: convert.GranGroup, Group: 4} }, "multiple of 4"},
		{"int8 codec", func(m *Manifest) { m.Tensors[3].Codec = CodecBase3 }, `int8 tensor with codec "base3"`},
		{"int8 length", func(m *Manifest) { m.Tensors[3].Section.Length = 5 }, "section length 5"},
		{"int8 trits", func(m *Manifest) { m.Tensors[3].Trits = &convert.TritCounts{Zero: 6} }, "carries"},
		{"1-D ternary", func(m *Manifest) { m.Tensors[2].Shape = []int64{12} }, "2 or more dimensions"},
		{"missing stats", func(m *Manifest) { m.Tensors[0].Stats = nil }, "missing stats"},
		{"unknown dtype without bytes", func(m *Manifest) {
			m.Tensors[1].SourceDType, m.Tensors[1].DType, m.Tensors[1].Section.Length = "F12", "F12", 0
		}, `"F12"`},
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

// A kept tensor of a source dtype without a known element size has the
// length the source's offsets gave it.
func TestKeptUnknownDType(t *testing.T) {
	m := validManifest()
	m.Tensors[1].SourceDType, m.Tensors[1].DType = "F4_PACKED", "F4_PACKED"
	m.Tensors[1].Section.Length = 2
	m.ComputeTotals()
	b, err := Encode(m)
	require.NoError(t, err)
	got, err := Decode(b)
	require.NoError(t, err)
	require.Equal(t, "F4_PACKED", got.Tensors[1].SourceDType)
}

// An entropy section takes any length from the smallest frame that can
// hold the base3 payload (a 6-byte header, then a 4-byte block per 128 KiB)
// to a frame of stored blocks holding it.
func TestEntropyLengthRange(t *testing.T) {
	for _, length := range []int64{10, 12, 19} {
		m := validManifest()
		m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, length
		m.ComputeTotals()
		require.NoError(t, m.Validate(), "length %d", length)
	}
	cases := []struct {
		n, lo, hi int64
	}{
		{0, EntropyMinLen, 13 + 3},                                // one empty block
		{1, 10, 13 + 3 + 1},                                       // one RLE block
		{5 * EntropyBlockMax, 10, 13 + 3 + EntropyBlockMax},       // exactly one full block
		{5*EntropyBlockMax + 1, 14, 13 + 6 + EntropyBlockMax + 1}, // a second block of 1 byte
		{1 << 40, 6 + 4*1677722, 13 + 3*1677722 + (1<<40+4)/5},    // 2^40 trits: no 9-byte frame holds them
		{5 * 32768 * EntropyBlockMax, 6 + 4*32768, 13 + 3*32768 + 32768*EntropyBlockMax},
	}
	for _, c := range cases {
		lo, hi, ok := TritPayloadRange(CodecEntropy, c.n)
		require.True(t, ok)
		require.Equal(t, c.lo, lo, "n=%d", c.n)
		require.Equal(t, c.hi, hi, "n=%d", c.n)
	}
	_, _, ok := TritPayloadRange(CodecRaw, 5)
	require.False(t, ok)
}

func TestDecodeRejectsUnknownKeys(t *testing.T) {
	b, err := Encode(validManifest())
	require.NoError(t, err)
	for _, bad := range []string{
		strings.Replace(string(b), `"tool":`, `"toolz":1,"tool":`, 1),
		strings.Replace(string(b), `"tie":`, `"ties":1,"tie":`, 1),
		string(b) + "{}",
		"[]",
		strings.Replace(string(b), `"name":"w"`, `"Name":"w"`, 1),                           // keys match exactly
		strings.Replace(string(b), `"codec":"base3"`, `"codec":"raw","codec":"base3"`, 1),   // no key twice
		strings.Replace(string(b), `"tool":"ternkit test"`, "\"tool\":\"ternkit \xff\"", 1), // UTF-8 only
		strings.Replace(string(b), `"source":{`, `"source":{"metadata":{"k":"1","k":"2"},`, 1),
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
