package main

import (
	"bytes"
	"context"
	"fmt"
	"image"
	"image/png"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
	"golang.org/x/net/html"

	"ternkit/internal/outsidetool"
	"ternkit/manifest"
	"ternkit/pack"
)

// chromiumFlags run the browser headless, offline and without state:
// nothing is fetched, nothing is kept (a fresh profile each run).
var chromiumFlags = []string{
	"--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
	"--disable-component-update", "--disable-sync", "--hide-scrollbars",
}

// runChromium runs headless Chromium on the page with extra flags and
// returns what it prints on stdout.
func runChromium(t *testing.T, chromium, page string, extra ...string) string {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	args := append(slices.Clone(chromiumFlags), "--user-data-dir="+t.TempDir())
	args = append(args, extra...)
	args = append(args, (&url.URL{Scheme: "file", Path: page}).String())
	cmd := exec.CommandContext(ctx, chromium, args...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	require.NoError(t, cmd.Run(), "chromium %v\nstderr:\n%s", extra, stderr.String())
	return stdout.String()
}

// The demo's report, rendered by headless Chromium (Debian package
// chromium): the DOM the browser builds holds both charts and one row per
// tensor, and the screenshot is a page drawn in the report's colours.
func TestReportInBrowser(t *testing.T) {
	chromium := outsidetool.Require(t, "chromium", "chromium")
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	page := filepath.Join(dir, demoModel+".html") // written by the demo, with its verify --against
	again := filepath.Join(dir, "again.html")
	code, _, errOut := ternkit("report", art, "-o", again, "--verify", "--against", src)
	require.Equal(t, exitOK, code, errOut)
	a, err := os.ReadFile(page)
	require.NoError(t, err)
	b, err := os.ReadFile(again)
	require.NoError(t, err)
	require.Equal(t, a, b, "report --verify --against writes the page the demo wrote")

	ar, err := pack.Open(art)
	require.NoError(t, err)
	var names []string
	ternary := 0
	for _, e := range ar.Tensors() {
		names = append(names, e.Name)
		if e.Kind == manifest.KindTernary {
			ternary++
		}
	}
	ar.Close()

	t.Run("dom", func(t *testing.T) {
		doc, err := html.Parse(strings.NewReader(runChromium(t, chromium, page, "--dump-dom")))
		require.NoError(t, err)
		layers := byID(doc, "layer-chart")
		require.NotNil(t, layers, "layer chart")
		require.Equal(t, "svg", layers.Data)
		// model.embed_tokens (int8) and model.layers.0 … model.layers.3 have
		// bars; model.norm, lm_head and train (kept) have labels instead
		require.Len(t, elements(layers, "rect", "bar bits"), demoLayers+1, "a bits bar per layer with ternary or int8 tensors")
		require.Len(t, elements(layers, "rect", "bar bits int8"), 1, "the int8 token table's layer")
		var notes []string
		for _, n := range elements(layers, "text", "note-text") {
			notes = append(notes, n.FirstChild.Data)
		}
		require.True(t, slices.ContainsFunc(notes, func(n string) bool { return strings.HasPrefix(n, "kept (I64, 64 bits)") }),
			"the step counter's layer is a label, not a 64-bit bar: %q", notes)
		// model.layers.0 … model.layers.3 hold ternary tensors
		require.Len(t, elements(layers, "rect", "bar zero"), demoLayers, "a zero bar per layer with ternary tensors")
		errs := byID(doc, "error-chart")
		require.NotNil(t, errs, "error chart")
		require.Len(t, elements(errs, "rect", "bar err"), demoLayers+1, "an error summary per layer with lossy tensors (and the int8 token table)")
		require.Less(t, demoLayers+1, ternary, "fewer bars than tensors")
		// the last layer's MLP down projection was trained ternary: its
		// row reads "exact" for the error and the cosine
		exact := 0
		for _, tr := range elements(byID(doc, "tensor-rows"), "tr", "") {
			if attr(tr, "data-tensor") != fmt.Sprintf("model.layers.%d.mlp.down_proj.weight", demoLayers-1) {
				continue
			}
			for _, td := range elements(tr, "td", "num") {
				if td.FirstChild != nil && td.FirstChild.Data == "exact" {
					exact++
				}
			}
		}
		require.Equal(t, 2, exact, "the trained-ternary tensor's error and cosine cells")
		require.NotNil(t, byID(doc, "verification"), "the verification's verdicts")
		rows := byID(doc, "tensor-rows")
		require.NotNil(t, rows, "tensor table")
		var got []string
		for _, tr := range elements(rows, "tr", "") {
			got = append(got, attr(tr, "data-tensor"))
		}
		require.Equal(t, names, got, "one row per tensor, in file order")
		require.Len(t, elements(byID(doc, "cautions"), "li", ""), 3)
	})

	t.Run("screenshot", func(t *testing.T) {
		shot := filepath.Join(t.TempDir(), "report.png")
		runChromium(t, chromium, page, "--screenshot="+shot, "--window-size=1100,2200")
		if dst := os.Getenv("TERNKIT_KEEP_SCREENSHOT"); dst != "" {
			data, _ := os.ReadFile(shot)
			require.NoError(t, os.WriteFile(dst, data, 0o644))
		}
		f, err := os.Open(shot)
		require.NoError(t, err)
		defer f.Close()
		img, err := png.Decode(f)
		require.NoError(t, err)
		require.Equal(t, image.Rect(0, 0, 1100, 2200), img.Bounds())

		colours := map[[3]uint8]int{}
		bounds := img.Bounds()
		for y := bounds.Min.Y; y < bounds.Max.Y; y++ {
			for x := bounds.Min.X; x < bounds.Max.X; x++ {
				r, g, b, _ := img.At(x, y).RGBA()
				colours[[3]uint8{uint8(r >> 8), uint8(g >> 8), uint8(b >> 8)}]++
			}
		}
		all, most := bounds.Dx()*bounds.Dy(), 0
		for _, n := range colours {
			most = max(most, n)
		}
		require.Greater(t, len(colours), 100, "text and charts give many colours (antialiasing)")
		require.Less(t, most, all*3/4, "no single colour covers three quarters of the page")
		// The error chart is the only large area in the light bar colour
		// #e6c3b9: 4 layers' bars of 11 px by some 500 px.
		near := func(c [3]uint8, want [3]int) bool {
			for i := range c {
				if d := int(c[i]) - want[i]; d < -6 || d > 6 {
					return false
				}
			}
			return true
		}
		light := 0
		for c, n := range colours {
			if near(c, [3]int{0xe6, 0xc3, 0xb9}) {
				light += n
			}
		}
		require.Greater(t, light, 15_000, "the error chart's bars are painted")
	})
}

// The page of a 24-layer decoder with the common tensor names, verified
// against its source under a budget: one error summary per layer (not 168
// bars), the budget line, names that wrap at their separators. To look at
// it: TERNKIT_KEEP_SCREENSHOT24=/tmp/report24.png go test ./cmd/ternkit -run Browser24
func TestReportInBrowser24(t *testing.T) {
	chromium := outsidetool.Require(t, "chromium", "chromium")
	dir := t.TempDir()
	src := writeDecoder(t, dir, 24, 64, 192, 512)
	art, page := filepath.Join(dir, "deep.tkart"), filepath.Join(dir, "deep.html")
	code, _, errOut := ternkit("pack", src, "-o", art, "--rule", "*embed_tokens*=int8", "--rule", "lm_head.weight=keep:f16",
		"--rule", "*.self_attn.*=ternary:row", "--rule", "*.mlp.*=ternary:group:64")
	require.Equal(t, exitOK, code, errOut)
	code, _, errOut = ternkit("report", art, "-o", page, "--verify", "--against", src, "--max-rel-rmse", "0.6")
	require.Equal(t, exitOK, code, errOut)

	doc, err := html.Parse(strings.NewReader(runChromium(t, chromium, page, "--dump-dom")))
	require.NoError(t, err)
	errs := byID(doc, "error-chart")
	require.Len(t, elements(errs, "rect", "bar err"), 24+1, "one summary per layer, and the int8 token table")
	require.Len(t, elements(errs, "line", "mark budget"), 1, "the budget line")
	rows := elements(byID(doc, "tensor-rows"), "tr", "")
	require.Len(t, rows, 2+24*9+1)
	name := elements(rows[3], "td", "name")[0]
	require.Len(t, elements(name, "wbr", ""), 7, "model.|layers.|0.|self_|attn.|q_|proj.|weight breaks at its separators")

	shot := filepath.Join(t.TempDir(), "deep.png")
	runChromium(t, chromium, page, "--screenshot="+shot, "--window-size=1100,2400")
	if dst := os.Getenv("TERNKIT_KEEP_SCREENSHOT24"); dst != "" {
		data, _ := os.ReadFile(shot)
		require.NoError(t, os.WriteFile(dst, data, 0o644))
	}
	f, err := os.Open(shot)
	require.NoError(t, err)
	defer f.Close()
	img, err := png.Decode(f)
	require.NoError(t, err)
	require.Equal(t, image.Rect(0, 0, 1100, 2400), img.Bounds())
}

// byID finds the element with the id under n.
func byID(n *html.Node, id string) *html.Node {
	if n.Type == html.ElementNode && attr(n, "id") == id {
		return n
	}
	for c := n.FirstChild; c != nil; c = c.NextSibling {
		if found := byID(c, id); found != nil {
			return found
		}
	}
	return nil
}

// elements lists the elements named tag under n whose class attribute
// starts with class ("" for any).
func elements(n *html.Node, tag, class string) []*html.Node {
	var out []*html.Node
	var walk func(*html.Node)
	walk = func(n *html.Node) {
		if n.Type == html.ElementNode && n.Data == tag && strings.HasPrefix(attr(n, "class"), class) {
			out = append(out, n)
		}
		for c := n.FirstChild; c != nil; c = c.NextSibling {
			walk(c)
		}
	}
	if n != nil {
		walk(n)
	}
	return out
}

func attr(n *html.Node, key string) string {
	for _, a := range n.Attr {
		if a.Key == key {
			return a.Val
		}
	}
	return ""
}
