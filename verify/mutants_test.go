package verify

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// editEntry rewrites the manifest entry of tensor name (hashes kept
// consistent by rewriteManifest).
func editEntry(t *testing.T, art, out, name string, edit func(x map[string]any)) {
	t.Helper()
	found := false
	rewriteManifest(t, art, out, func(m map[string]any) {
		for _, x := range tensorsOf(m) {
			if x := x.(map[string]any); x["name"] == name {
				edit(x)
				found = true
			}
		}
	})
	require.True(t, found, name)
}

// failuresOf lists the report's failures as "check tensor: detail".
func failuresOf(rep *Report) []string {
	var out []string
	for _, f := range rep.Failures() {
		out = append(out, f.Name+" "+f.Tensor+": "+f.Detail)
	}
	return out
}

// Every field the manifest records about a tensor and that the source
// decides is compared with the source by verify --against. Each case
// changes one field of one tensor with every hash rewritten to match, so
// that the artifact alone still verifies (apart from the decode check of
// trit counts, which the payload decides): only the comparison with the
// source can catch it, and it names the tensor and the value.
func TestAgainstCatchesEachRecordedField(t *testing.T) {
	const (
		row   = "blocks.0.attn.q.weight"    // ternary, row scales
		tern  = "blocks.0.mlp.up.weight"    // ternary, one scale
		int8s = "blocks.0.mlp.down.weight"  // int8
		conv  = "blocks.0.norm.weight"      // kept, BF16 converted to F16
		kept  = "blocks.0.post_norm.weight" // kept as it is
	)
	dir := t.TempDir()
	src, art, _ := bf16Fixture(t, dir, pack.Bits2)
	rep := runAgainst(t, art, src)
	require.True(t, rep.OK(), "%+v", rep.Failures())
	a, err := pack.Open(art)
	require.NoError(t, err)
	m := a.Manifest()
	entries := map[string]manifest.Tensor{}
	for _, e := range m.Tensors {
		entries[e.Name] = e
	}
	a.Close()
	require.Equal(t, manifest.KindKept, entries[conv].Kind)
	require.Equal(t, "F16", entries[conv].DType)
	require.Equal(t, "BF16", entries[kept].DType)
	require.Equal(t, convert.GranTensor, entries[tern].Granularity.Kind)
	require.False(t, entries[tern].Exact)

	stats := func(name string, field string, v float64) func(out string) {
		return func(out string) {
			editEntry(t, art, out, name, func(x map[string]any) {
				x["stats"].(map[string]any)[field] = json.Number(fmt.Sprint(v))
			})
		}
	}
	cases := []struct {
		name   string
		make   func(out string)
		alone  bool // the artifact alone still verifies
		check  string
		tensor string
		want   string
	}{
		{"ternary cosine", stats(tern, "cosine", 0.5), true, CheckRequantize, tern, "statistics"},
		{"ternary rel_rmse", stats(tern, "rel_rmse", entries[tern].Stats.RelRMSE*1.5), true, CheckRequantize, tern, "statistics"},
		{"ternary zero_fraction", stats(row, "zero_fraction", 0.125), true, CheckRequantize, row, "statistics"},
		{"int8 max_abs_err", stats(int8s, "max_abs_err", 1), true, CheckRequantize, int8s, "statistics"},
		{"converted cosine", stats(conv, "cosine", 0.25), true, CheckKept, conv, "statistics"},
		{"exact", func(out string) {
			editEntry(t, art, out, tern, func(x map[string]any) { x["exact"] = true })
		}, true, CheckRequantize, tern, "exact is true, re-quantizing the source gives false"},
		{"trit counts", func(out string) {
			editEntry(t, art, out, tern, func(x map[string]any) {
				c := x["trits"].(map[string]any)
				z, err := c["zero"].(json.Number).Int64()
				require.NoError(t, err)
				p, err := c["pos"].(json.Number).Int64()
				require.NoError(t, err)
				c["zero"], c["pos"] = json.Number(fmt.Sprint(z-1)), json.Number(fmt.Sprint(p+1))
			})
		}, false, CheckDecode, tern, "trit counts"},
		{"scale", func(out string) {
			editEntry(t, art, out, tern, func(x map[string]any) {
				x["scale"] = json.Number(fmt.Sprint(entries[tern].Scale * 2))
			})
		}, true, CheckRequantize, tern, "scale 0 is "},
		{"kept bytes", func(out string) {
			rewriteSection(t, art, out, kept, false, func(p []byte) { p[4] ^= 0x01 })
		}, true, CheckKept, kept, "kept section at artifact byte"},
		{"converted bytes", func(out string) {
			rewriteSection(t, art, out, conv, false, func(p []byte) { p[6] ^= 0x01 })
		}, true, CheckKept, conv, fmt.Sprintf("F16 bytes at artifact byte %d differ", entries[conv].Section.Offset)},
		{"shape of a ternary tensor", func(out string) {
			// [9 37] as [37 9]: at tensor granularity the trits, the scale
			// and the statistics are the same
			editEntry(t, art, out, tern, func(x map[string]any) { x["shape"] = []any{37, 9} })
		}, true, "", tern, "shape: manifest records [37 9], the source "},
		{"shape of a kept tensor", func(out string) {
			editEntry(t, art, out, kept, func(x map[string]any) { x["shape"] = []any{1, 13} })
		}, true, "", kept, "shape: manifest records [1 13], the source "},
		{"dtype of a kept tensor", func(out string) {
			// BF16 bytes recorded as F16: the same bytes and hashes
			editEntry(t, art, out, kept, func(x map[string]any) { x["source_dtype"], x["dtype"] = "F16", "F16" })
		}, true, "", kept, `source_dtype: manifest records "F16", the source `},
		{"source dtype of a ternary tensor", func(out string) {
			editEntry(t, art, out, tern, func(x map[string]any) { x["source_dtype"] = "F16" })
		}, true, "", tern, `source_dtype: manifest records "F16", the source `},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "t.tkart")
			c.make(out)
			alone, err := Run(out, Options{})
			require.NoError(t, err)
			require.Equal(t, c.alone, alone.OK(), "%v", failuresOf(alone))
			rep := runAgainst(t, out, src)
			require.False(t, rep.OK())
			var found []string
			for _, f := range rep.Failures() {
				if f.Tensor == c.tensor && (c.check == "" || f.Name == c.check) {
					found = append(found, f.Detail)
				}
			}
			require.NotEmpty(t, found, "no failure of %s in %v", c.tensor, failuresOf(rep))
			require.Contains(t, strings.Join(found, "\n"), c.want)
			for _, f := range rep.Failures() {
				if f.Name != CheckBound { // a report-wide check
					require.Equal(t, c.tensor, f.Tensor, "only the edited tensor fails: %v", failuresOf(rep))
				}
			}
		})
	}
}

// A trit changed from +1 to −1, its section hash rewritten, breaks the
// per-element bound (|w − s·t| ≤ s/2 where |w| ≤ 1.5 s): the bound check
// fails and names the tensor and the element.
func TestAgainstBoundBroken(t *testing.T) {
	const name = "blocks.0.mlp.up.weight"
	for _, codec := range []pack.Codec{pack.Bits2, pack.Base3} {
		t.Run(string(codec), func(t *testing.T) {
			src, art, _ := bf16Fixture(t, t.TempDir(), codec)
			good := runAgainst(t, art, src)
			c, ok := good.Find(CheckBound, "")
			require.True(t, ok)
			require.True(t, c.OK)
			a, err := pack.Open(art)
			require.NoError(t, err)
			tensor, err := a.Tensor(name)
			require.NoError(t, err)
			trits := make([]int8, tensor.Len())
			require.NoError(t, tensor.DecodeTrits(trits))
			a.Close()
			first := slices.Index(trits, 1)
			require.Greater(t, first, 0)
			// element 0 too: the first element is an element like the others
			for _, at := range []int{first, 0} {
				changed := slices.Clone(trits)
				changed[at] = -changed[at]
				if changed[at] == 0 {
					changed[at] = 1 // |w| < s/2, so |w − s| > s/2
				}
				out := filepath.Join(t.TempDir(), "t.tkart")
				rewriteSection(t, art, out, name, false, func(p []byte) { copy(p, codec.Encode(nil, changed)) })
				rep := runAgainst(t, out, src)
				c, ok = rep.Find(CheckBound, "")
				require.True(t, ok, "%v", failuresOf(rep))
				require.False(t, c.OK, c.Detail)
				require.True(t, strings.HasPrefix(c.Detail, fmt.Sprintf("per-element bound broken; closest to it: tensor %q element %d, error minus bound = ", name, at)), c.Detail)
			}
		})
	}
}

// Tensors that come equally close to the bound are reported by the first
// in source order, so that the report is the same on every run: here two
// exact tensors, each element's error 0, so each is −0.5 × its scale from
// the bound at element 0. A kept tensor is never named.
func TestAgainstBoundTieNamesFirst(t *testing.T) {
	dir := t.TempDir()
	exact := func(c float32) []byte {
		v := make([]float32, 4*8)
		for i := range v {
			v[i] = c * float32(i%3-1)
		}
		b, err := convert.EncodeFloat32(nil, "F32", v)
		require.NoError(t, err)
		return b
	}
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "a.weight", DType: "F32", Shape: []int64{4, 8}, Data: exact(0.5)},
		{Name: "b.weight", DType: "F32", Shape: []int64{4, 8}, Data: exact(0.25)},
		// kept as it is: no bound to come close to
		{Name: "c.norm.weight", DType: "F32", Shape: []int64{8}, Data: exact(0.5)[:32]},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	art := filepath.Join(dir, "a.tkart")
	m, err := pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	s.Close()
	require.NoError(t, err)
	for _, e := range m.Tensors[:2] {
		require.True(t, e.Exact, e.Name)
	}
	require.Equal(t, manifest.KindKept, m.Tensors[2].Kind)
	rep := runAgainst(t, art, src)
	c, ok := rep.Find(CheckBound, "")
	require.True(t, ok)
	require.True(t, c.OK)
	require.Equal(t, `per-element bound holds; closest to it: tensor "a.weight" element 0, error minus bound = -0.5 × its scale (tolerance 1e-06)`, c.Detail)
}

// Every test vector of pack/FORMAT.md gets the verdict its table gives:
// the "ok" vectors verify, each "bad" one fails, with the class of check
// the failure belongs to. bad-counts.tkart in particular is caught only by
// counting the decoded trits.
func TestVectorsVerdicts(t *testing.T) {
	dir := filepath.Join("..", "testdata", "vectors")
	b, err := os.ReadFile(filepath.Join(dir, "vectors.json"))
	require.NoError(t, err)
	var vectors []struct {
		File   string `json:"file"`
		Expect string `json:"expect"`
	}
	require.NoError(t, json.Unmarshal(b, &vectors))
	require.GreaterOrEqual(t, len(vectors), 50)
	checkOf := map[string][]string{
		"counts":       {CheckDecode},
		"payload":      {CheckDecode},
		"section-hash": {CheckSection},
	}
	for _, v := range vectors {
		t.Run(v.File, func(t *testing.T) {
			rep, err := Run(filepath.Join(dir, v.File), Options{})
			require.NoError(t, err)
			if v.Expect == "ok" {
				require.True(t, rep.OK(), "%v", failuresOf(rep))
				return
			}
			require.False(t, rep.OK(), "expected %s", v.Expect)
			want, ok := checkOf[v.Expect]
			if !ok {
				want = []string{CheckStructure, CheckPadding}
			}
			require.Contains(t, want, rep.Failures()[0].Name, "%s: %v", v.Expect, failuresOf(rep))
		})
	}
	rep, err := Run(filepath.Join(dir, "bad-counts.tkart"), Options{})
	require.NoError(t, err)
	// its payload is "+-0+0+-00-+-0+" (testdata/vectors/README.md): four
	// −1, five 0 and five +1; the manifest moves one 0 to +1
	require.Equal(t, []string{CheckDecode + " layer.w: trit counts {Neg:4 Zero:5 Pos:5}, manifest records {Neg:4 Zero:4 Pos:6}"}, failuresOf(rep))
}

// A limit equal to the statistic holds (≤ for the maxima, ≥ for the
// cosine), a limit of 0 is valid, and the messages number budgets from 1.
func TestBudgetEdges(t *testing.T) {
	_, art := fixture(t, t.TempDir(), pack.Base3, nil)
	a, err := pack.Open(art)
	require.NoError(t, err)
	st := *a.Manifest().Tensors[0].Stats // blocks.0.attn.q.weight
	a.Close()
	value := map[string]float64{MaxRelRMSE: st.RelRMSE, MinCosine: st.Cosine, MaxClipped: st.ClippedFraction, MaxAbsError: st.MaxAbsErr}
	for _, metric := range Metrics {
		b := &Budget{Limits: []Limit{{Match: "blocks.0.attn.q.weight", Metric: metric, Value: value[metric]}}}
		rep, err := Run(art, Options{Budget: b})
		require.NoError(t, err)
		c, ok := rep.Find(CheckBudget, "blocks.0.attn.q.weight")
		require.True(t, ok)
		require.True(t, c.OK, "%s: a limit equal to the value %v holds: %s", metric, value[metric], c.Detail)
	}

	l, err := ParseLimit(MaxClipped, "0")
	require.NoError(t, err)
	require.Equal(t, Limit{Match: "*", Metric: MaxClipped, Value: 0}, l)
	_, err = ParseLimit(MaxClipped, "=0.5")
	require.ErrorIs(t, err, ErrBudget)
	require.Contains(t, err.Error(), "with an empty glob")

	for _, c := range []struct{ text, want string }{
		{"[[budget]]\nmax_rel_rmse = 1", "b.toml: budget 1: match must be"},
		{"[[budget]]\nmatch = \"*\"\nmax_clipped = 0\n[[budget]]\nmatch = \"*\"\nmin_cosine = \"high\"", "b.toml: budget 2: min_cosine must be a number"},
		{"[[budget]]\nmatch = \"*\"\nmin_cosine = -1.5", "b.toml: budget 1: "},
		{"[[budget]]\nmatch = \"*\"", "b.toml: budget 1 (*) sets no limit"},
		{"[[budget]]\nmatch = \"*\"\nmax_clipped = 0\n[[budget]]\nmatch = \"b*\"\nmax_rmse = 1", `b.toml: budget 2: unknown key "max_rmse"`},
	} {
		_, err := ParseBudget("b.toml", []byte(c.text))
		require.ErrorIs(t, err, ErrBudget, c.text)
		require.Contains(t, err.Error(), c.want, c.text)
	}
}

// A large source tensor the artifact keeps as it is is read in pieces, the
// progress advancing piece by piece; a tensor the artifact quantizes, or
// one it keeps converted, is read whole, in one step.
func TestAgainstProgressInPieces(t *testing.T) {
	dir := t.TempDir()
	big := make([]byte, 3<<20+5)
	for i := range big {
		big[i] = byte(i * 13)
	}
	w := make([]float32, 64*64)
	for i := range w {
		w[i] = float32(i%7) - 3
	}
	f32, err := convert.EncodeFloat32(nil, "F32", w)
	require.NoError(t, err)
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "embed.tokens.weight", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
		{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{64, 64}, Data: f32},
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{64, 64}, Data: f32},
	}, nil))
	p := &convert.Policy{}
	r, err := convert.ParseRule("*norm*=keep:f16")
	require.NoError(t, err)
	p.Rules = append(p.Rules, r)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Policy: p})
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	var sections int64
	for _, e := range a.Tensors() {
		sections += e.StoredBytes()
	}
	a.Close()

	defer func(n int64) { keptPieceSize = n }(keptPieceSize)
	keptPieceSize = 1 << 20
	var steps []int64
	last := int64(0)
	rep, err := Run(art, Options{Source: s, Workers: 1, Progress: func(done, _ int64) {
		if done > sections { // the source phase
			steps = append(steps, done-max(last, sections))
		}
		last = done
	}})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%v", failuresOf(rep))
	// the kept tensor in one piece (its bytes lie within the file's first
	// 4 MiB segment), then the two others whole (4 × 64 × 64 bytes each)
	require.Equal(t, []int64{3<<20 + 5, 4 * 64 * 64, 4 * 64 * 64}, steps)
}

// A wrong hash for the first piece of a section, the section hash right,
// is caught like any other piece's: the first piece is a piece job too.
func TestVerifyNamesBadFirstChunk(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	forged := filepath.Join(dir, "forged.tkart")
	forgePieceHash(t, art, forged, 0)
	rep, err := Run(forged, Options{})
	require.NoError(t, err)
	require.Equal(t, []string{fmt.Sprintf("%s big: section at byte %d (%d bytes): piece 0 (its bytes 0..%d, file bytes %d..%d) does not match its recorded chaining value",
		CheckSection, sec.Offset, sec.Length, 1<<22, sec.Offset, sec.Offset+1<<22)}, failuresOf(rep))
}

// Ranges of a mapped artifact: any range inside the file, empty ones and
// the one ending at its last byte included, is a slice of the map; one
// reaching past either end is an error.
func TestMappedRanges(t *testing.T) {
	b := artifactBytes{mapped: []byte("0123456789")}
	for _, r := range []struct{ off, n int64 }{{0, 0}, {0, 10}, {8, 2}, {10, 0}, {3, 4}} {
		p, err := b.at(nil, r.off, r.n)
		require.NoError(t, err, "%+v", r)
		require.Equal(t, string(b.mapped[r.off:r.off+r.n]), string(p), "%+v", r)
	}
	for _, r := range []struct{ off, n int64 }{{-1, 1}, {0, -1}, {9, 2}, {11, 0}, {0, 11}} {
		_, err := b.at(nil, r.off, r.n)
		require.ErrorIs(t, err, io.ErrUnexpectedEOF, "%+v", r)
	}
}

// Scratch space is reused whenever it is large enough.
func TestScratchReused(t *testing.T) {
	s := make([]int8, 3, 5)
	orig := &s[:1][0]
	g := grow(&s, 5)
	require.Len(t, g, 5)
	require.Same(t, orig, &g[0], "capacity 5 holds 5")
	g = grow(&s, 6)
	require.Len(t, g, 6)
	require.Equal(t, 6, cap(s))

	b := artifactBytes{ra: strings.NewReader("0123456789")}
	buf := make([]byte, 4)
	p, err := b.at(buf, 2, 4)
	require.NoError(t, err)
	require.Equal(t, "2345", string(p))
	require.Same(t, &buf[0], &p[0], "a buffer of 4 holds 4")
	p, err = b.at(buf, 2, 5)
	require.NoError(t, err)
	require.Equal(t, "23456", string(p))
}

// A report passes only with at least one check and no failure, and counts
// both.
func TestReportCounts(t *testing.T) {
	require.False(t, (&Report{}).OK(), "no check run is no pass")
	rep := &Report{}
	rep.add(CheckStructure, "", true, "")
	require.True(t, rep.OK())
	rep.add(CheckDecode, "w", false, "bad %d", 1)
	rep.add(CheckDecode, "v", false, "")
	require.Equal(t, 1, rep.Passed)
	require.Equal(t, 2, rep.Failed)
	require.False(t, rep.OK())
	require.Equal(t, []Check{{Name: CheckDecode, Tensor: "w", Detail: "bad 1"}, {Name: CheckDecode, Tensor: "v"}}, rep.Failures())
}

// A regular file is mapped, whole; bytes read through another reader are
// not.
func TestMapArtifact(t *testing.T) {
	_, art := fixture(t, t.TempDir(), pack.Base3, nil)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	m := mapArtifact(a)
	defer unmapArtifact(m)
	if runtime.GOOS != "linux" {
		t.Skip("mapping is checked on Linux")
	}
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	require.Equal(t, b, m)

	r, err := pack.NewReader(bytes.NewReader(b), int64(len(b)))
	require.NoError(t, err)
	require.Nil(t, mapArtifact(r))
}

// Truncated while mapped, the failure names a byte past the cut and inside
// the file as it was.
func TestTruncatedWhileMappedNamesByte(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	if !mapped(t, art) {
		t.Skip("the artifact is not mapped here")
	}
	st, err := os.Stat(art)
	require.NoError(t, err)
	cut := sec.Offset + 1<<22 + 100
	rep, err := Run(art, Options{Progress: func(done, _ int64) {
		if done == 0 {
			require.NoError(t, os.Truncate(art, cut))
		}
	}})
	require.NoError(t, err)
	f := rep.Failures()[0]
	var at, byteAt int64
	_, err = fmt.Sscanf(f.Detail, "read section at byte %d: "+errArtifactChanged.Error()+": no data at byte %d (truncated?)", &at, &byteAt)
	require.NoError(t, err, f.Detail)
	require.Equal(t, sec.Offset+1<<22, at, "the piece holding the cut")
	require.GreaterOrEqual(t, byteAt, cut, f.Detail)
	require.Less(t, byteAt, st.Size(), f.Detail)
}

// A section is read into the scratch space, which is reused.
func TestReadPayloadIntoScratch(t *testing.T) {
	_, art, _ := bf16Fixture(t, t.TempDir(), pack.Bits2)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	tn, err := a.Tensor("blocks.0.mlp.up.weight")
	require.NoError(t, err)
	want, err := tn.VerifiedPayload()
	require.NoError(t, err)
	var b redoBuffers
	b.payload = make([]byte, 0, len(want))
	scratch := &b.payload[:1][0]
	got, err := b.readPayload(a, tn)
	require.NoError(t, err)
	require.Equal(t, want, got)
	require.Same(t, scratch, &got[0])
}

// BF16 weights of a ternary tensor are re-quantized where they lie, never
// decoded into the float32 scratch space; other kinds decode into it.
func TestRedoReadsBF16InPlace(t *testing.T) {
	src, art, data := bf16Fixture(t, t.TempDir(), pack.Bits2)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	for _, st := range s.Tensors {
		tn, err := a.Tensor(st.Name)
		require.NoError(t, err)
		if tn.Entry.Kind == manifest.KindKept && tn.Entry.DType == tn.Entry.SourceDType {
			continue // compared by hash alone
		}
		var b redoBuffers
		v := tensorVerdict{at: -1}
		require.Equal(t, "", b.redo(a, tn, a.Manifest().Recipe, st, data[st.Name], &v), st.Name)
		if tn.Entry.Kind == manifest.KindTernary {
			require.Nil(t, b.weights, "%s: read in place", st.Name)
			require.GreaterOrEqual(t, v.at, 0, st.Name)
		} else {
			require.Len(t, b.weights, tn.Len(), "%s: decoded", st.Name)
		}
	}
}

// firstReadFails fails the first read that touches byte bad.
type firstReadFails struct {
	data  []byte
	bad   int64
	reads *int
}

func (f firstReadFails) ReadAt(p []byte, off int64) (int, error) {
	if off <= f.bad && f.bad < off+int64(len(p)) {
		*f.reads++
		if *f.reads == 1 {
			return 0, errDevice
		}
	}
	return bytes.NewReader(f.data).ReadAt(p, off)
}

// A piece that cannot be read when its chaining value is computed (the one
// read of its bytes: a section of format 1.4 is not streamed apart) fails
// the section naming the piece's offset.
func TestVerifyNamesUnreadablePiece(t *testing.T) {
	dir := t.TempDir()
	art, sec := bigArtifact(t, dir)
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	reads := 0
	r := firstReadFails{b, sec.Offset + 2*(1<<22) + 7, &reads}
	rep, err := RunReaderAt("a.tkart", r, int64(len(b)), Options{Workers: 1})
	require.NoError(t, err)
	require.Equal(t, 1, reads, "each byte of the section is read once")
	require.Equal(t, []string{fmt.Sprintf("%s big: read section at byte %d: %v", CheckSection, sec.Offset+2*(1<<22), errDevice)}, failuresOf(rep))
}
