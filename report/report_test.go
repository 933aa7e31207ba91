package report

import (
	"bytes"
	"fmt"
	"html/template"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
	"ternkit/pack"
)

// hostileName is a tensor name a checkpoint could carry to attack a page
// that does not escape it.
const hostileName = `blocks.1.<img src=x onerror=alert(1)>"q'.weight`

// artifact packs a small checkpoint (two layers, an embedding, a norm and
// a tensor with a hostile name) with the codec and returns its path.
func artifact(t *testing.T, codec pack.Codec) string {
	t.Helper()
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(3, 4))
	tensors := []convert.WriteTensor{
		{Name: "embed.weight", DType: "F32", Shape: []int64{6, 4}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 24))},
		{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{8, 8}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 64))},
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{8}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 8))},
		{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{5, 7}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 35))},
		{Name: hostileName, DType: "F32", Shape: []int64{3, 3}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 9))},
	}
	src := filepath.Join(dir, "small.safetensors")
	require.NoError(t, convert.WriteFile(src, tensors, map[string]string{"model": "report-test"}))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "small"+pack.Extension)
	_, err = pack.Build(s, art, pack.Options{Codec: codec, Recipe: convert.DefaultRecipe(), Tool: "ternkit test"})
	require.NoError(t, err)
	return art
}

func TestSummarize(t *testing.T) {
	cases := []struct {
		codec pack.Codec
		// payload bytes of n trits: ceil(n/5) for base3, ceil(n/4) for
		// bits2 (pack/FORMAT.md, "Codecs")
		payload func(n int64) int64
	}{
		{pack.Base3, func(n int64) int64 { return (n + 4) / 5 }},
		{pack.Bits2, func(n int64) int64 { return (n + 3) / 4 }},
		// an entropy frame is decoded before use: in memory, base3 digits
		{pack.Entropy, func(n int64) int64 { return (n + 4) / 5 }},
	}
	for _, c := range cases {
		t.Run(string(c.codec), func(t *testing.T) {
			art := artifact(t, c.codec)
			s, err := Summarize(art)
			require.NoError(t, err)
			st, err := os.Stat(art)
			require.NoError(t, err)
			require.Equal(t, st.Size(), s.Bytes)

			ternaryParams := int64(64 + 35 + 9)
			// three ternary tensors, each payload and its one float32 scale
			ternaryBytes := c.payload(64) + c.payload(35) + c.payload(9) + 3*4
			keptBytes := int64(4 * (24 + 8)) // F32 embedding and norm, as stored
			require.Equal(t, ternaryParams, s.Totals.TernaryParams)
			require.Equal(t, ternaryBytes+keptBytes, s.WeightMemory.TernaryForm)
			// every tensor is F32 in the source: all 140 values at 2 bytes
			// (F16 is IEEE 754 binary16)
			require.Equal(t, int64(2*(24+64+8+35+9)), s.WeightMemory.F16Form)

			srcSize := s.Totals.SourceBytes
			require.InDelta(t, float64(srcSize)/float64(st.Size()), s.Ratio, 1e-12)
			require.Len(t, s.Tensors, 5)
			var zero, all int64
			for _, tn := range s.Tensors {
				n := int64(1)
				for _, d := range tn.Shape {
					n *= d
				}
				require.InDelta(t, 8*float64(tn.Bytes)/float64(n), tn.BitsPerWeight, 1e-12, tn.Name)
				if tn.Ternary() {
					require.Greater(t, tn.RelRMSE, 0.0, tn.Name)
					zero += int64(math.Round(tn.ZeroFraction * float64(n)))
					all += n
				} else {
					require.Equal(t, 32.0, tn.BitsPerWeight, "kept F32: 32 bits per value")
					require.Zero(t, tn.ZeroFraction)
				}
			}
			require.InDelta(t, float64(zero)/float64(all), s.ZeroFraction, 1e-12)
		})
	}
}

func TestSummarizeRejects(t *testing.T) {
	dir := t.TempDir()
	_, err := Summarize(filepath.Join(dir, "missing.tkart"))
	require.ErrorIs(t, err, os.ErrNotExist)
	junk := filepath.Join(dir, "junk.tkart")
	require.NoError(t, os.WriteFile(junk, bytes.Repeat([]byte{'x'}, 200), 0o644))
	_, err = Summarize(junk)
	require.ErrorIs(t, err, pack.ErrNotArtifact)
	require.Contains(t, err.Error(), junk)
}

func TestLayerName(t *testing.T) {
	cases := []struct{ tensor, layer string }{
		{"blocks.3.attn.q.weight", "blocks.3"},
		{"model.layers.12.mlp.down_proj.weight", "model.layers.12"},
		{"h.0.ln_1.bias", "h.0"},
		{"lm_head.weight", "lm_head"},
		{"embed.tokens.weight", "embed.tokens"},
		{"step", "step"},
		{"layer1.weight", "layer1"}, // a number inside a component is not a layer index
		{"7.weight", "7"},
		{"a..b", "a."},
	}
	for _, c := range cases {
		require.Equal(t, c.layer, LayerName(c.tensor), c.tensor)
	}
}

func TestLayers(t *testing.T) {
	s, err := Summarize(artifact(t, pack.Base3))
	require.NoError(t, err)
	layers := s.Layers()
	require.Len(t, layers, 3)
	require.Equal(t, []string{"embed", "blocks.0", "blocks.1"}, []string{layers[0].Name, layers[1].Name, layers[2].Name})

	emb := layers[0]
	require.Equal(t, 0, emb.TernaryTensors)
	require.Equal(t, 32.0, emb.BitsPerWeight)
	require.Zero(t, emb.ZeroFraction)

	require.Zero(t, emb.Quantized)
	require.Equal(t, []string{"F32"}, emb.KeptDTypes)

	b0 := layers[1]
	require.Equal(t, 3, b0.Tensors)
	require.Equal(t, 2, b0.TernaryTensors)
	require.Equal(t, 2, b0.Quantized)
	require.Equal(t, 2, b0.Lossy)
	// quantized bits: the 13 + 7 payload bytes over the 64 + 35 weights
	require.InDelta(t, 8*20.0/99, b0.QuantizedBits, 1e-12)
	var qErr, upErr float64
	for _, tn := range s.Tensors {
		switch tn.Name {
		case "blocks.0.attn.q.weight":
			qErr = tn.RelRMSE
		case "blocks.0.mlp.up.weight":
			upErr = tn.RelRMSE
		}
	}
	require.Equal(t, min(qErr, upErr), b0.ErrMin)
	require.Equal(t, max(qErr, upErr), b0.ErrMax)
	require.Equal(t, (qErr+upErr)/2, b0.ErrMedian, "the median of two is their mean")
	require.Equal(t, int64(64+8+35), b0.Params)
	// 13 + 7 payload bytes (ceil(64/5), ceil(35/5)) and 32 bytes of F32 norm
	require.Equal(t, int64(13+7+32), b0.Bytes)
	require.InDelta(t, 8*52.0/107, b0.BitsPerWeight, 1e-12)
	q, up := s.Tensors[1], s.Tensors[3]
	require.InDelta(t, (q.ZeroFraction*64+up.ZeroFraction*35)/99, b0.ZeroFraction, 1e-12)
}

func TestNiceAxis(t *testing.T) {
	cases := []struct{ v, top, step float64 }{
		{16, 17.5, 2.5},
		{1, 1, 0.2},
		{0.5162, 0.6, 0.1},
		{32, 35, 5},
		{0, 1, 0.25},
		{math.Inf(1), 1, 0.25},
	}
	for _, c := range cases {
		top, step := niceAxis(c.v)
		require.InDelta(t, c.top, top, 1e-9, "v=%v", c.v)
		require.InDelta(t, c.step, step, 1e-9, "v=%v", c.v)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for range 1000 {
		v := math.Exp(rng.Float64()*20 - 10)
		top, step := niceAxis(v)
		ticks := math.Round(top / step)
		require.GreaterOrEqual(t, top, v*(1-1e-9), "v=%v", v)
		require.Less(t, top-step, v, "v=%v: no empty tick at the end", v)
		require.LessOrEqual(t, ticks, 7.0, "v=%v", v)
		require.GreaterOrEqual(t, ticks, 2.0, "v=%v", v)
	}
}

func TestFormat(t *testing.T) {
	// binary prefixes: KiB = 1024 B, MiB = 1024² B (IEC 80000-13)
	bytesCases := []struct {
		n    int64
		want string
	}{{0, "0 B"}, {1023, "1023 B"}, {1024, "1.0 KiB"}, {1536, "1.5 KiB"}, {8429768, "8.0 MiB"}, {3 << 30, "3.0 GiB"}}
	for _, c := range bytesCases {
		require.Equal(t, c.want, FormatBytes(c.n))
	}
	countCases := []struct {
		n    int64
		want string
	}{{0, "0"}, {999, "999"}, {1000, "1,000"}, {3162112, "3,162,112"}, {-1234567, "-1,234,567"}}
	for _, c := range countCases {
		require.Equal(t, c.want, FormatCount(c.n))
	}
	require.Equal(t, "3.06x smaller", FormatSizeChange(8429768.0/2751380))
	require.Equal(t, "2.00x larger", FormatSizeChange(0.5))
	require.Equal(t, "1.00x smaller", FormatSizeChange(1))
	require.Equal(t, "[2048x256]", FormatShape([]int64{2048, 256}))
	require.Equal(t, "[]", FormatShape(nil))
}

func TestWriteHTML(t *testing.T) {
	s, err := Summarize(artifact(t, pack.Base3))
	require.NoError(t, err)
	var a, b bytes.Buffer
	require.NoError(t, WriteHTML(&a, s))
	require.NoError(t, WriteHTML(&b, s))
	page := a.String()
	require.Equal(t, page, b.String(), "same summary, same bytes")

	// Self-contained: no element or attribute that loads anything (quoted
	// attribute values, where tensor names go, are emptied first).
	markup := regexp.MustCompile(`"[^"]*"`).ReplaceAllString(page, `""`)
	for _, banned := range []string{`(?i)https?:`, `(?i)<(script|link|img|iframe|object|embed|image|use)\b`,
		`(?i)<[^>]*\s(src|href|xlink:href)\s*=`, `(?i)url\(`, `(?i)@import`} {
		require.NotRegexp(t, banned, markup)
	}
	require.Contains(t, page, "default-src 'none'")

	// The hostile name is text, never markup.
	require.NotContains(t, page, "<img")
	require.Contains(t, page, "&lt;img src=x onerror=alert(1)&gt;")

	require.Len(t, regexp.MustCompile(`<tr class="[a-z]+" data-tensor=`).FindAllString(page, -1), 5, "one row per tensor")
	require.Len(t, regexp.MustCompile(`<rect class="bar err"`).FindAllString(page, -1), 2, "one error summary per layer with ternary tensors")
	require.Len(t, regexp.MustCompile(`<rect class="span err"`).FindAllString(page, -1), 2, "each with its min-max span")
	require.Len(t, regexp.MustCompile(`<rect class="bar bits`).FindAllString(page, -1), 2, "a bits bar per layer with ternary tensors")
	require.Contains(t, page, ">kept (F32, 32 bits)</text>", "the embedding's layer is a label, not a bar")
	require.Len(t, regexp.MustCompile(`<rect class="bar zero"`).FindAllString(page, -1), 2, "a zero bar per layer with ternary tensors")
	require.Regexp(t, `>min 0\.\d{4} · median 0\.\d{4} · max 0\.\d{4} \(2 tensors\)</text>`, page)
	require.Contains(t, page, "blocks.<wbr>0.<wbr>attn.<wbr>q.<wbr>weight", "names wrap at separators")
	for _, c := range cautions {
		require.Contains(t, page, strings.ReplaceAll(c, "'", "&#39;"))
	}
	require.Contains(t, page, s.FileBLAKE3)
	require.Contains(t, page, "report-test", "source metadata")
}

// BenchmarkWriteHTML renders the page of a 32-layer model's manifest
// (7 ternary projections and 2 norms per layer), the size of a release.
func BenchmarkWriteHTML(b *testing.B) {
	s := &Summary{Artifact: "bench.tkart", Source: manifest.Source{Metadata: map[string]string{"model": "bench"}}}
	rng := rand.New(rand.NewPCG(7, 8))
	for l := range 32 {
		for _, p := range []string{"q", "k", "v", "o", "gate", "up", "down"} {
			s.Tensors = append(s.Tensors, Tensor{Name: fmt.Sprintf("model.layers.%d.%s.weight", l, p), Shape: []int64{4096, 4096},
				Kind: manifest.KindTernary, Codec: manifest.CodecBase3, Bytes: 4096 * 4096 / 5, BitsPerWeight: 1.6,
				ZeroFraction: 0.3 + 0.02*rng.Float64(), RelRMSE: 0.5 + 0.03*rng.Float64(), params: 4096 * 4096})
		}
		for _, n := range []string{"in_norm", "post_norm"} {
			s.Tensors = append(s.Tensors, Tensor{Name: fmt.Sprintf("model.layers.%d.%s.weight", l, n), Shape: []int64{4096},
				Kind: manifest.KindKept, Codec: manifest.CodecRaw, Bytes: 8192, BitsPerWeight: 16, params: 4096})
		}
	}
	var out bytes.Buffer
	b.ReportAllocs()
	for b.Loop() {
		out.Reset()
		if err := WriteHTML(&out, s); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(out.Len()), "page-bytes")
}

// The page shows what a release review needs: stored dtypes, int8 zero
// fraction and error, cosine, exact tensors labelled, the policy as
// applied, the full recipe, the creation time, and the verification's and
// signature's verdicts with the budget on the error chart.
func TestWritePage(t *testing.T) {
	s := &Summary{
		Artifact: "scout.tkart", Tool: "ternkit test", Created: "2026-12-02T00:00:00Z",
		Recipe: convert.DefaultRecipe(), Policy: []string{"embed.* = int8", "lm_head.* = keep:f16", "* (2-D) = ternary", "* = keep"},
		Totals: manifest.Totals{Tensors: 5, TernaryTensors: 2, Int8Tensors: 1, KeptTensors: 2},
		Tensors: []Tensor{
			{Name: "embed.tokens.weight", Shape: []int64{8, 4}, Kind: manifest.KindInt8, Codec: manifest.CodecRaw, SourceDType: "BF16", Granularity: "row",
				Bytes: 64, BitsPerWeight: 16, ZeroFraction: 0.0312, RelRMSE: 0.0071, Cosine: 0.99997, params: 32},
			{Name: "blocks.0.attn.q.weight", Shape: []int64{4, 4}, Kind: manifest.KindTernary, Codec: manifest.CodecBase3, SourceDType: "BF16", Granularity: "row",
				Bytes: 20, BitsPerWeight: 10, ZeroFraction: 0.25, RelRMSE: 0.5123, Cosine: 0.8861, params: 16, zero: 4},
			{Name: "adapter.barcode.weight", Shape: []int64{4, 4}, Kind: manifest.KindTernary, Codec: manifest.CodecBase3, SourceDType: "BF16", Granularity: "tensor",
				Exact: true, Bytes: 4, BitsPerWeight: 2, ZeroFraction: 0.5, Cosine: 1, params: 16, zero: 8},
			{Name: "lm_head.weight", Shape: []int64{8, 4}, Kind: manifest.KindKept, Codec: manifest.CodecRaw, SourceDType: "BF16", DType: "F16",
				Bytes: 64, BitsPerWeight: 16, RelRMSE: 0.0021, Cosine: 0.99999, params: 32},
			{Name: "final_norm.weight", Shape: []int64{4}, Kind: manifest.KindKept, Codec: manifest.CodecRaw, SourceDType: "F32", DType: "F32",
				Bytes: 16, BitsPerWeight: 32, Cosine: 1, params: 4},
		},
	}
	var b bytes.Buffer
	require.NoError(t, WritePage(&b, s, Page{
		Verification: &Verification{From: "verify JSON v.json", Source: "scout.safetensors", OK: false, Passed: 40, Failed: 1,
			Failures: []string{"budget blocks.0.attn.q.weight: rel_rmse 0.5123 above 0.5"}, Signature: "signed by key abc123", SignatureOK: true},
		Budget: []BudgetLine{{Match: "*", Value: 0.5}, {Match: "blocks.*", Value: 0.55}},
	}))
	page := b.String()
	row := func(name string) string {
		m := regexp.MustCompile(`<tr class="[a-z0-9]+" data-tensor="` + regexp.QuoteMeta(name) + `">.*</tr>`).FindString(page)
		require.NotEmpty(t, m, name)
		return m
	}
	require.Contains(t, row("lm_head.weight"), "<td>kept:f16</td>", "a converted kept tensor shows its stored dtype")
	require.Contains(t, row("final_norm.weight"), "<td>kept</td>")
	emb := row("embed.tokens.weight")
	for _, want := range []string{"<td>int8</td>", "<td>row</td>", ">3.1%<", ">0.0071<", ">1.0000<"} {
		require.Contains(t, emb, want, "int8: zero fraction, error and cosine")
	}
	require.Contains(t, row("blocks.0.attn.q.weight"), ">0.8861<", "cosine")
	require.Equal(t, 2, strings.Count(row("adapter.barcode.weight"), ">exact<"), "error and cosine of an exact tensor")
	require.Contains(t, page, `<text class="note-text" x="115" y="`, "a note in the error chart")
	require.Regexp(t, `<text class="note-text"[^>]*>exact</text>`, page, "the exact layer is labelled exact")
	for _, rule := range s.Policy {
		require.Contains(t, page, "<li><code>"+template.HTMLEscapeString(rule)+"</code></li>")
	}
	require.Contains(t, page, "<dt>sum</dt><dd>blocked16: gamma's float64 sum in blocks of 2^20 weights")
	require.Contains(t, page, "created 2026-12-02T00:00:00Z")
	require.Contains(t, page, `<span class="verdict-fail">FAILED</span>: 40 checks passed, 1 failed`)
	require.Contains(t, page, "budget blocks.0.attn.q.weight: rel_rmse 0.5123 above 0.5")
	require.Contains(t, page, `<span class="verdict-ok">valid</span>: signed by key abc123`)
	require.Contains(t, page, `class="mark-label budget"`)
	require.Contains(t, page, ">budget 0.5</text>")
	require.Contains(t, page, ">budget 0.55 (blocks.*)</text>")

	// Without a verification the page says none was run.
	b.Reset()
	require.NoError(t, WriteHTML(&b, s))
	require.Contains(t, b.String(), `<div class="big">not run</div>`)
	require.NotContains(t, b.String(), `id="verification"`)
	require.NotContains(t, b.String(), "mark budget")
}

func TestWrapName(t *testing.T) {
	require.Equal(t, template.HTML("model.<wbr>layers.<wbr>12.<wbr>self_<wbr>attn.<wbr>q_<wbr>proj.<wbr>weight"), wrapName("model.layers.12.self_attn.q_proj.weight"))
	require.Equal(t, template.HTML("a&lt;b&gt;.<wbr>c"), wrapName("a<b>.c"))
	require.Equal(t, template.HTML("plain"), wrapName("plain"))
}
