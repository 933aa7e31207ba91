package manifest

import (
	"math"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// Each rule of pack/FORMAT.md, "Manifest", broken alone: the manifest is
// rejected with ErrInvalid and a message naming the value. The inputs pass
// every earlier rule, so each case reaches the rule it names.
func TestValidateEachRule(t *testing.T) {
	upper := strings.Repeat("AB", 32)         // 64 digits, uppercase
	notHex := strings.Repeat("ab", 31) + "gh" // 64 characters, two not hex
	cases := []struct {
		name string
		edit func(m *Manifest)
		want string
	}{
		// a ternary tensor at tensor granularity needs a positive finite scale
		{"scale zero", func(m *Manifest) { m.Tensors[0].Scale = 0 }, "scale 0 is not a positive"},
		{"scale NaN", func(m *Manifest) { m.Tensors[0].Scale = float32(math.NaN()) }, "scale NaN is not a positive"},
		{"scale +Inf", func(m *Manifest) { m.Tensors[0].Scale = float32(math.Inf(1)) }, "scale +Inf is not a positive"},
		{"scale -Inf", func(m *Manifest) { m.Tensors[0].Scale = float32(math.Inf(-1)) }, "scale -Inf is not a positive"},
		// hashes are 64 lowercase hex digits, wherever they are
		{"uppercase section hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = upper }, "is not lowercase hex"},
		{"non-hex section hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = notHex }, "is not lowercase hex"},
		{"uppercase source hash", func(m *Manifest) { m.Tensors[1].SourceBLAKE3 = upper }, `source_blake3: hash "ABAB`},
		{"uppercase source span", func(m *Manifest) { m.Tensors[1].SourceBLAKE3, m.Tensors[1].SourceSpan = "", upper }, `source_span: hash "ABAB`},
		{"no source hash", func(m *Manifest) { m.Tensors[1].SourceBLAKE3 = "" }, `source_blake3: hash "" is not 64`},
		{"both source hashes", func(m *Manifest) { m.Tensors[1].SourceSpan = m.Tensors[1].SourceBLAKE3 }, "both source_blake3 and source_span"},
		{"uppercase scales hash", func(m *Manifest) { m.Tensors[2].Scales.BLAKE3 = upper }, `scales: hash "ABAB`},
		{"uppercase file hash", func(m *Manifest) { m.Source.Files[0].BLAKE3 = upper }, `source file "m.safetensors": hash "ABAB`},
		{"short hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = strings.Repeat("a", 63) }, "is not 64 hex digits"},
		{"long hash", func(m *Manifest) { m.Tensors[0].Section.BLAKE3 = strings.Repeat("a", 65) }, "is not 64 hex digits"},
		// sections
		{"negative offset", func(m *Manifest) { m.Tensors[1].Section.Offset = -1 }, "offset -1 length 8"},
		{"chunks on a short section", func(m *Manifest) {
			m.Tensors[1].Section.Chunks = []string{m.Tensors[1].Section.BLAKE3}
		}, "1 chunk hashes for 8 bytes (want 0)"},
		{"bad chunk hash", func(m *Manifest) {
			s := &m.Tensors[1].Section
			s.Length = ChunkSize + 2
			m.Tensors[1].Shape = []int64{(ChunkSize + 2) / 2}
			s.Chunks = []string{s.BLAKE3, upper}
		}, "chunk: hash"},
		{"scales negative length", func(m *Manifest) { m.Tensors[2].Scales.Length = -8 }, "scales: offset 256 length -8"},
		// kinds and their fields
		{"ternary with dtype", func(m *Manifest) { m.Tensors[0].DType = "F32" }, `ternary tensor with dtype "F32"`},
		{"no trit counts", func(m *Manifest) { m.Tensors[0].Trits = nil }, "trit counts <nil>"},
		{"negative count", func(m *Manifest) { m.Tensors[0].Trits = &convert.TritCounts{Neg: -1, Zero: 9, Pos: 4} }, "do not sum to 12"},
		{"ternary from an integer dtype", func(m *Manifest) { m.Tensors[0].SourceDType = "I32" }, `ternary tensor from source dtype "I32" (only float dtypes are quantized)`},
		{"ternary from an unknown dtype", func(m *Manifest) { m.Tensors[0].SourceDType = "F12" }, `ternary tensor from source dtype "F12" (only float dtypes are quantized)`},
		{"int8 granularity", func(m *Manifest) { m.Tensors[3].Granularity = &convert.PerTensor }, "want row"},
		{"int8 without granularity", func(m *Manifest) { m.Tensors[3].Granularity = nil }, "granularity <nil>"},
		{"int8 dtype", func(m *Manifest) { m.Tensors[3].DType = "I8" }, "int8 tensor carries"},
		{"int8 scale", func(m *Manifest) { m.Tensors[3].Scale = 1 }, "int8 tensor carries"},
		{"int8 exact", func(m *Manifest) { m.Tensors[3].Exact = true }, "int8 tensor carries"},
		{"int8 missing stats", func(m *Manifest) { m.Tensors[3].Stats = nil }, "missing stats"},
		{"int8 1-D", func(m *Manifest) { m.Tensors[3].Shape, m.Tensors[3].Scales.Length = []int64{6}, 24 }, "2 or more dimensions"},
		{"int8 without scales", func(m *Manifest) { m.Tensors[3].Scales = nil }, "without a scales section"},
		{"kept length", func(m *Manifest) { m.Tensors[1].Section.Length = 6 }, "section length 6, 4 BF16 elements need 8"},
		{"kept codec", func(m *Manifest) { m.Tensors[1].Codec = CodecBase3 }, `kept tensor with codec "base3"`},
		{"kept trits", func(m *Manifest) { m.Tensors[1].Trits = &convert.TritCounts{Zero: 4} }, "kept tensor carries"},
		{"kept granularity", func(m *Manifest) { m.Tensors[1].Granularity = &convert.PerTensor }, "kept tensor carries"},
		{"kept scales", func(m *Manifest) { m.Tensors[1].Scales = &Section{Offset: 0, Length: 4, BLAKE3: upper} }, "kept tensor carries"},
		{"kept exact", func(m *Manifest) { m.Tensors[1].Exact = true }, "kept tensor carries"},
		{"kept unknown dtype with bytes lost", func(m *Manifest) {
			m.Tensors[1].SourceDType, m.Tensors[1].DType = "Q4_BLOCK", "Q4_BLOCK"
			m.Tensors[1].Shape = []int64{0}
		}, `section length 8 for 0 elements of dtype "Q4_BLOCK"`},
		{"kept unknown dtype converted", func(m *Manifest) { m.Tensors[1].DType = "Q4_BLOCK" }, `unknown dtype "Q4_BLOCK"`},
		{"group size too large", func(m *Manifest) {
			m.Tensors[2].Granularity = &convert.Granularity{Kind: convert.GranGroup, Group: 24}
		}, "24"},
		{"totals bytes", func(m *Manifest) { m.Totals.KeptSectionBytes-- }, "totals"},
		{"totals source", func(m *Manifest) { m.Totals.SourceBytes++ }, "totals"},
		{"policy", func(m *Manifest) { m.Policy = []string{} }, "empty list"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m := validManifest()
			c.edit(m)
			if !strings.HasPrefix(c.name, "totals") {
				m.ComputeTotals()
			}
			err := m.Validate()
			require.ErrorIs(t, err, ErrInvalid)
			require.Contains(t, err.Error(), c.want)
		})
	}
}

// The helpers the rules use, at their edges.
func TestSectionHelpers(t *testing.T) {
	require.Equal(t, 0, NumChunks(0))
	require.Equal(t, 0, NumChunks(ChunkSize))
	require.Equal(t, 2, NumChunks(ChunkSize+1))
	require.Equal(t, 3, NumChunks(3*ChunkSize))

	m := validManifest()
	require.Equal(t, []Section{m.Tensors[0].Section}, m.Tensors[0].Sections())
	require.Equal(t, []Section{m.Tensors[2].Section, *m.Tensors[2].Scales}, m.Tensors[2].Sections())
	require.Equal(t, int64(3), m.Tensors[0].StoredBytes())
	require.Equal(t, int64(3+8), m.Tensors[2].StoredBytes())
	require.Equal(t, 1, m.Tensors[0].NumScales(), "tensor granularity")
	require.Equal(t, 2, m.Tensors[2].NumScales())
	require.Equal(t, 0, m.Tensors[1].NumScales(), "kept")
	e := m.Tensors[2]
	e.Shape = []int64{-1, 6}
	require.Equal(t, 0, e.NumScales(), "negative shape")

	for _, c := range []struct {
		codec string
		n, l  int64
	}{{CodecBits2, 0, 0}, {CodecBits2, 1, 1}, {CodecBits2, 4, 1}, {CodecBits2, 5, 2},
		{CodecBase3, 0, 0}, {CodecBase3, 5, 1}, {CodecBase3, 6, 2}} {
		l, ok := TritPayloadLen(c.codec, c.n)
		require.True(t, ok)
		require.Equal(t, c.l, l, "%s %d", c.codec, c.n)
	}
	_, ok := TritPayloadLen(CodecEntropy, 5)
	require.False(t, ok)
}

// A ternary tensor may lack any one trit value: counts of 0 are valid.
func TestValidateZeroCounts(t *testing.T) {
	for _, c := range []convert.TritCounts{{Neg: 6, Pos: 6}, {Zero: 12}, {Neg: 12}, {Pos: 12}} {
		m := validManifest()
		m.Tensors[0].Trits = &c
		require.NoError(t, m.Validate(), "%+v", c)
	}
}

// JSON of the wrong shape where the manifest has a string, a number or a
// list is rejected as invalid, never a panic, and keys are checked inside
// maps too.
func TestDecodeWrongShapes(t *testing.T) {
	b, err := Encode(validManifest())
	require.NoError(t, err)
	for _, bad := range []string{
		strings.Replace(string(b), `"tool":"ternkit test"`, `"tool":{"a":1}`, 1),
		strings.Replace(string(b), `"tool":"ternkit test"`, `"tool":[{"a":1}]`, 1),
		strings.Replace(string(b), `"shape":[3,4]`, `"shape":[{"a":{"b":1}}]`, 1),
		strings.Replace(string(b), `"source":{`, `"source":{"metadata":{"k":{"x":1,"x":2}},`, 1),
	} {
		require.NotEqual(t, string(b), bad)
		require.NotPanics(t, func() {
			_, err := Decode([]byte(bad))
			require.ErrorIs(t, err, ErrInvalid, bad)
		}, bad)
	}
}

// The totals of validManifest, worked by hand: w (ternary [3 4], 3 payload
// bytes), b (kept BF16 [4], 8 bytes), r (ternary [2 6], 3 payload and 8
// scale bytes), e (int8 [3 2], 6 code and 12 scale bytes), n (kept F16 [4],
// 8 bytes); one source file of 100 bytes.
func TestComputeTotalsWorkedByHand(t *testing.T) {
	m := validManifest()
	m.Totals = Totals{}
	m.ComputeTotals()
	require.Equal(t, Totals{
		Tensors: 5, TernaryTensors: 2, Int8Tensors: 1, KeptTensors: 2,
		TernaryParams: 12 + 12, Int8Params: 6, KeptParams: 4 + 4,
		SourceBytes:         100,
		TernarySectionBytes: 3 + 3 + 8, Int8SectionBytes: 6 + 12, KeptSectionBytes: 8 + 8,
		BitsPerTernaryWeight: 8.0 * 14 / 24,
	}, m.Totals)

	// without ternary weights there are no bits per ternary weight
	m.Tensors = []Tensor{m.Tensors[1], m.Tensors[3]}
	m.ComputeTotals()
	require.Equal(t, Totals{
		Tensors: 2, Int8Tensors: 1, KeptTensors: 1, Int8Params: 6, KeptParams: 4,
		SourceBytes: 100, Int8SectionBytes: 18, KeptSectionBytes: 8,
	}, m.Totals)
}

// NumElements at the edges of int64: the largest product that fits is
// kept, one more is an overflow.
func TestNumElementsEdges(t *testing.T) {
	require.Equal(t, int64(math.MaxInt64), NumElements([]int64{math.MaxInt64}))
	require.Equal(t, int64(math.MaxInt64), NumElements([]int64{1, math.MaxInt64, 1}))
	require.Equal(t, int64(-1), NumElements([]int64{2, 1 << 62}))
	require.Equal(t, int64(1<<62), NumElements([]int64{2, 1 << 61}))
	require.Equal(t, int64(1), NumElements(nil), "a scalar")
	require.Equal(t, int64(0), NumElements([]int64{0, 5}))
	require.Equal(t, int64(-1), NumElements([]int64{3, -1}))
}

// Every hex digit is a hash digit, and a section may start at byte 0 and
// be empty as far as the manifest's own rules go (the reader places it).
func TestValidateEdgesAccepted(t *testing.T) {
	m := validManifest()
	all := strings.Repeat("0123456789abcdef", 4)
	m.Tensors[0].Section.BLAKE3 = all
	m.Tensors[1].SourceBLAKE3 = all
	m.Tensors[2].SourceBLAKE3, m.Tensors[2].SourceSpan = "", all // format 1.4
	m.Source.Files[0].BLAKE3 = all
	m.Tensors[1].Section.Offset = 0
	require.NoError(t, m.Validate())
	m.Tensors[1].Shape, m.Tensors[1].Section.Length = []int64{0}, 0
	m.ComputeTotals()
	require.NoError(t, m.Validate())
}

// A repeated key is named with its path, list indexes included.
func TestDecodeNamesRepeatedKeyPath(t *testing.T) {
	b, err := Encode(validManifest())
	require.NoError(t, err)
	bad := strings.Replace(string(b), `"name":"e",`, `"name":"e","name":"e",`, 1)
	require.NotEqual(t, string(b), bad)
	_, err = Decode([]byte(bad))
	require.ErrorIs(t, err, ErrInvalid)
	require.Contains(t, err.Error(), `manifest.tensors[3]: key "name" appears twice`)
}
