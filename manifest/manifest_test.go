package manifest

import (
	"strings"
	"testing"

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
		{"entropy too short", func(m *Manifest) { m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, 8 }, "takes 9 to 19 bytes"},
		{"entropy too long", func(m *Manifest) { m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, 20 }, "section length 20"},
		{"kept length", func(m *Manifest) { m.Tensors[1].Section.Length = 6 }, "section length 6"},
		{"hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = "xyz" }, `"xyz"`},
		{"scale", func(m *Manifest) { m.Tensors[0].Scale = -1 }, "scale -1"},
		{"counts", func(m *Manifest) { m.Tensors[0].Trits.Pos = 5 }, "do not sum to 12"},
		{"negative shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{-4} }, "[-4]"},
		{"overflowing shape", func(m *Manifest) { m.Tensors[1].Shape = []int64{1 << 40, 1 << 40} }, "overflows"},
		{"kept with scale", func(m *Manifest) { m.Tensors[1].Scale = 1 }, "ternary fields"},
		{"dtype", func(m *Manifest) { m.Tensors[1].SourceDType = "F12" }, `"F12"`},
		{"totals", func(m *Manifest) { m.Totals.TernaryParams++ }, "totals"},
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

// An entropy section takes any length from the smallest frame to a frame of
// stored blocks holding the base3 payload.
func TestEntropyLengthRange(t *testing.T) {
	for _, length := range []int64{EntropyMinLen, 12, 19} {
		m := validManifest()
		m.Tensors[0].Codec, m.Tensors[0].Section.Length = CodecEntropy, length
		m.ComputeTotals()
		require.NoError(t, m.Validate(), "length %d", length)
	}
	cases := []struct {
		n, hi int64
	}{
		{0, 13 + 3}, // one empty block
		{5 * EntropyBlockMax, 13 + 3 + EntropyBlockMax},       // exactly one full block
		{5*EntropyBlockMax + 1, 13 + 6 + EntropyBlockMax + 1}, // a second block of 1 byte
	}
	for _, c := range cases {
		lo, hi, ok := TritPayloadRange(CodecEntropy, c.n)
		require.True(t, ok)
		require.Equal(t, int64(EntropyMinLen), lo)
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
