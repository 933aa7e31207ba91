package report

import (
	"bytes"
	"strings"
	"testing"

	"golang.org/x/net/html"

	"ternkit/manifest"
)

// elementCount parses a page and counts its elements.
func elementCount(t *testing.T, page []byte) int {
	doc, err := html.Parse(bytes.NewReader(page))
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	var walk func(*html.Node)
	walk = func(x *html.Node) {
		if x.Type == html.ElementNode {
			n++
		}
		for c := x.FirstChild; c != nil; c = c.NextSibling {
			walk(c)
		}
	}
	walk(doc)
	return n
}

func pageFor(t *testing.T, name, key, value string) []byte {
	s := &Summary{
		Artifact: name + ".tkart", Tool: name,
		Source: manifest.Source{Files: []manifest.SourceFile{{Name: name}}, Metadata: map[string]string{"model": name, key + "_": value}},
		Totals: manifest.Totals{Tensors: 2, TernaryTensors: 1, KeptTensors: 1, TernaryParams: 10, KeptParams: 4},
		Tensors: []Tensor{
			{Name: name, Shape: []int64{2, 5}, Kind: manifest.KindTernary, Codec: manifest.CodecBase3, Bytes: 2,
				BitsPerWeight: 1.6, ZeroFraction: 0.2, Scale: 0.5, RelRMSE: 0.36, params: 10, zero: 2},
			{Name: name + ".norm", Shape: []int64{4}, Kind: manifest.KindKept, Codec: manifest.CodecRaw, Bytes: 8,
				BitsPerWeight: 16, params: 4},
		},
	}
	var b bytes.Buffer
	if err := WriteHTML(&b, s); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// plainLike keeps the dots, digits and separators (where the table's
// names may wrap) of name and turns every other rune into "a".
func plainLike(name string) string {
	return strings.Map(func(r rune) rune {
		if strings.ContainsRune("._/-", r) || ('0' <= r && r <= '9') {
			return r
		}
		return 'a'
	}, name)
}

// Names and metadata come from the checkpoint, which may be hostile: no
// value can add an element to the page (html/template escapes it in text,
// attributes and SVG alike).
func FuzzWriteHTMLEscapes(f *testing.F) {
	f.Add("blocks.0.attn.q.weight", "k", "v")
	f.Add(`<script>alert(1)</script>`, `"><img src=x>`, `</title><svg onload=alert(1)>`)
	f.Add(`x" onmouseover="alert(1)`, "</style><b>", "]]><![CDATA[<i>")
	f.Add("…ünïcode\u2028", "<!--", "-->")
	f.Fuzz(func(t *testing.T, name, key, value string) {
		// the plain page groups its tensors into the same layers (layer
		// names depend only on the dots and digits of a tensor name) and
		// breaks the names at the same separators
		want := elementCount(t, pageFor(t, plainLike(name), "k", "v"))
		got := pageFor(t, name, key, value)
		if n := elementCount(t, got); n != want {
			t.Fatalf("name %q, metadata %q=%q: %d elements, a plain page has %d", name, key, value, n, want)
		}
		if strings.Contains(string(got), "<script") {
			t.Fatalf("name %q: a script element", name)
		}
	})
}
