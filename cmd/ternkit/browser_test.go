package main

import (
	"bytes"
	"context"
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
	chromium := requireTool(t, "chromium")
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	page := filepath.Join(dir, demoModel+".html") // written by the demo
	again := filepath.Join(dir, "again.html")
	code, _, errOut := ternkit("report", art, "-o", again)
	require.Equal(t, exitOK, code, errOut)
	a, err := os.ReadFile(page)
	require.NoError(t, err)
	b, err := os.ReadFile(again)
	require.NoError(t, err)
	require.Equal(t, a, b, "report writes the page the demo wrote")

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
		// model.embed_tokens, model.layers.0 … model.layers.3, model.norm, lm_head, train
		require.Len(t, elements(layers, "rect", "bar bits"), demoLayers+4, "a bits bar per layer")
		// model.layers.0 … model.layers.3 hold ternary tensors
		require.Len(t, elements(layers, "rect", "bar zero"), demoLayers, "a zero bar per layer with ternary tensors")
		errs := byID(doc, "error-chart")
		require.NotNil(t, errs, "error chart")
		require.Len(t, elements(errs, "rect", "bar err"), ternary, "an error bar per ternary tensor")
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
		// The error chart is the only large area in the bar colour #b04a36:
		// 28 bars of 11 px by some 500 px, far more than the 4 px card border.
		near := func(c [3]uint8, want [3]int) bool {
			for i := range c {
				if d := int(c[i]) - want[i]; d < -6 || d > 6 {
					return false
				}
			}
			return true
		}
		rust := 0
		for c, n := range colours {
			if near(c, [3]int{0xb0, 0x4a, 0x36}) {
				rust += n
			}
		}
		require.Greater(t, rust, 50_000, "the error chart's bars are painted")
	})
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
