package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/filedigest"
	"ternkit/manifest"
	"ternkit/pack"
)

// gaussianFixture writes a small F32 checkpoint with one 2-D weight and one
// norm vector (latent-looking weights: ternarizing them loses information).
func gaussianFixture(t *testing.T, dir string) string {
	t.Helper()
	w := make([]float32, 8*16)
	for i := range w {
		w[i] = float32(i%7)*0.1 - 0.33
	}
	return writeFixture(t, dir, map[string][]float32{"layer.proj.weight": w, "layer.norm.weight": w[:16]},
		map[string][]uint64{"layer.proj.weight": {8, 16}, "layer.norm.weight": {16}})
}

func manifestOf(t *testing.T, art string) *manifest.Manifest {
	t.Helper()
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	return a.Manifest()
}

// The manifest's policy is the rules applied, whatever route set them: a
// file, flags, both, and the demo's own policy file.
func TestManifestPolicyIsApplied(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	pol := filepath.Join(dir, "p.toml")
	require.NoError(t, os.WriteFile(pol, []byte("[[rule]]\nmatch = \"*.proj.*\"\naction = \"ternary:row\"\n\n[[rule]]\nmatch = \"*\"\naction = \"keep\"\n"), 0o644))
	def := convert.DefaultPolicy().Describe()
	for _, c := range []struct {
		args []string
		want []string
	}{
		{nil, def},
		{[]string{"--policy", pol}, []string{"*.proj.* = ternary:row", "* = keep"}},
		{[]string{"--rule", "*.proj.*=int8"}, append([]string{"*.proj.* = int8"}, def...)},
		{[]string{"--policy", pol, "--rule", "*.proj.*=ternary:group:8"}, []string{"*.proj.* = ternary:group:8", "*.proj.* = ternary:row", "* = keep"}},
	} {
		art := filepath.Join(t.TempDir(), "a.tkart")
		code, _, errOut := ternkit(append([]string{"pack", src, "-o", art}, c.args...)...)
		require.Equal(t, exitOK, code, errOut)
		m := manifestOf(t, art)
		require.Equal(t, c.want, m.Policy, "%v", c.args)
		if len(c.args) == 4 { // both: the flag's rule comes first and decides
			require.Equal(t, "group:8", m.Tensors[1].Granularity.String(), "%+v", m.Tensors[1])
		}
	}

	// The demo packs with its policy file and records that file's rules.
	_, art := demoArtifact(t, t.TempDir())
	p, err := convert.ParsePolicy("demo", []byte(demoPolicy))
	require.NoError(t, err)
	require.Equal(t, p.Describe(), manifestOf(t, art).Policy)
	require.NotEqual(t, def, manifestOf(t, art).Policy)
}

// A policy's dtype names are case-insensitive: "bf16" matches BF16 tensors.
func TestPolicyLowercaseDType(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	pol := filepath.Join(dir, "lower.toml")
	require.NoError(t, os.WriteFile(pol, []byte("[[rule]]\nmatch = \"*\"\ndims = 2\ndtypes = [\"bf16\"]\naction = \"ternary\"\n"), 0o644))
	art := filepath.Join(dir, "lower.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "--policy", pol)
	require.Equal(t, exitOK, code, errOut)
	require.NotContains(t, errOut, "warning")
	m := manifestOf(t, art)
	require.Equal(t, []string{"* (2-D, BF16) = ternary"}, m.Policy)
	require.Greater(t, m.Totals.TernaryTensors, 20, out)

	// A dtype name ternkit does not know is a warning, an error under --strict.
	require.NoError(t, os.WriteFile(pol, []byte("[[rule]]\nmatch = \"*\"\ndims = 2\ndtypes = [\"BF61\"]\naction = \"ternary\"\n"), 0o644))
	code, _, errOut = ternkit("pack", src, "-o", art, "--policy", pol)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, errOut, `ternkit: warning: rule 1 (* (2-D, BF61) = ternary): dtype "BF61" is not one ternkit knows`)
	strict := filepath.Join(dir, "strict.tkart")
	code, _, errOut = ternkit("pack", src, "-o", strict, "--policy", pol, "--strict")
	require.Equal(t, exitInput, code, errOut)
	require.Contains(t, errOut, `dtype "BF61"`)
	require.NoFileExists(t, strict)
}

// An artifact larger than its source says so, not "0.9x smaller"; "N of M
// tensors exact" appears only when some are.
func TestPackResultWording(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	art := filepath.Join(dir, "a.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "--rule", "*=keep")
	require.Equal(t, exitOK, code, errOut)
	require.Regexp(t, `\(\d+\.\d\dx larger\)`, out, "kept tensors plus a manifest: larger than the source")
	require.NotContains(t, out, "smaller")

	code, out, errOut = ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "ternary: 128 weights")
	require.NotContains(t, out, "exact", "no tensor is exact")
	require.Contains(t, errOut, "caution:")
}

// Exit codes: a file that is not an artifact is an input error (2) for
// every command that reads artifacts; completion of an unknown shell is a
// usage error.
func TestExitCodes(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	text := filepath.Join(dir, "notes.txt")
	require.NoError(t, os.WriteFile(text, []byte("Fernmoss vault inventory notes\n"), 0o644))
	key := filepath.Join(dir, "k")
	code, _, errOut := ternkit("keygen", "-o", key)
	require.Equal(t, exitOK, code, errOut)
	for _, notArt := range []string{src, text} {
		for _, args := range [][]string{
			{"verify", notArt},
			{"verify", notArt, "--json"},
			{"inspect", notArt},
			{"report", notArt, "-o", filepath.Join(dir, "r.html")},
			{"diff", art, notArt},
			{"diff", notArt, art},
			{"unpack", notArt, "-o", filepath.Join(dir, "u.safetensors")},
			{"sign", notArt, "--key", key + ".key"},
		} {
			code, out, errOut := ternkit(args...)
			require.Equal(t, exitInput, code, "%v\nstdout: %s\nstderr: %s", args, out, errOut)
			require.Contains(t, errOut, "not a ternkit artifact", "%v", args)
		}
	}
	code, _, errOut = ternkit("completion", "tcsh")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `"tcsh"`)
	code, _, _ = ternkit("completion")
	require.Equal(t, exitInput, code)
}

// keygen refuses to replace a key and names the key file, never its
// temporary file.
func TestKeygenExistingKey(t *testing.T) {
	dir := t.TempDir()
	name := filepath.Join(dir, "release")
	require.NoError(t, os.WriteFile(name+".key", []byte("old"), 0o600))
	code, _, errOut := ternkit("keygen", "-o", name)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, name+".key")
	require.NotContains(t, errOut, ".tmp")
	require.Equal(t, []string{"release.key"}, dirNames(t, dir))
	got, err := os.ReadFile(name + ".key")
	require.NoError(t, err)
	require.Equal(t, "old", string(got))
}

// --strict and TERNKIT_STRICT=1 make warnings errors (exit 2, nothing
// written); without them the warning is printed and in --json.
func TestStrict(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	art := filepath.Join(dir, "a.tkart")
	code, out, errOut := ternkit("pack", src, "-o", art, "--rule", "missing.*=int8", "--json")
	require.Equal(t, exitOK, code, errOut)
	var res struct {
		Warnings []string `json:"warnings"`
		BLAKE3   string   `json:"blake3"`
		Bytes    int64    `json:"bytes"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &res))
	require.Len(t, res.Warnings, 1)
	require.Contains(t, res.Warnings[0], `rule "missing.* = int8" matches no tensor`)
	st, err := os.Stat(art)
	require.NoError(t, err)
	require.Equal(t, st.Size(), res.Bytes)
	d, err := filedigest.File(art)
	require.NoError(t, err)
	require.Equal(t, d.BLAKE3, res.BLAKE3)
	require.Len(t, res.BLAKE3, 64)

	for _, c := range []struct {
		env  string
		args []string
	}{
		{"", []string{"--strict"}},
		{"1", nil},
	} {
		t.Setenv(strictEnv, c.env)
		out := filepath.Join(t.TempDir(), "s.tkart")
		code, _, errOut := ternkit(append([]string{"pack", src, "-o", out, "--rule", "missing.*=int8"}, c.args...)...)
		require.Equal(t, exitInput, code, "%v %s", c, errOut)
		require.Contains(t, errOut, "--strict: 1 warning(s) are errors")
		require.Contains(t, errOut, `rule "missing.* = int8" matches no tensor`)
		require.NoFileExists(t, out)
		require.Empty(t, dirNames(t, filepath.Dir(out)), "no temporary file either")
	}
	t.Setenv(strictEnv, "")

	// verify: a budget glob that matches nothing
	code, _, _ = ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code)
	code, out, errOut = ternkit("verify", art, "--max-rel-rmse", "nothing.*=0.9", "--json")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, `"warnings": [`)
	code, out, errOut = ternkit("verify", art, "--max-rel-rmse", "nothing.*=0.9", "--json", "--strict")
	require.Equal(t, exitInput, code, out)
	require.Contains(t, errOut, `nothing.*`)
	require.Contains(t, out, `"ok": true`, "the report is printed; the warning makes it exit 2")
	code, _, errOut = ternkit("verify", art, "--max-rel-rmse", "layer.*=0.9", "--strict")
	require.Equal(t, exitOK, code, errOut)
}

// -q prints nothing on success; the caution is printed once per run, and
// in no subcommand's --help.
func TestQuietAndCaution(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	code, out, errOut := ternkit("pack", src, "-o", filepath.Join(dir, "a.tkart"), "-q")
	require.Equal(t, exitOK, code)
	require.Empty(t, out)
	require.Empty(t, errOut)
	code, out, errOut = ternkit("verify", filepath.Join(dir, "a.tkart"), "--against", src, "-q")
	require.Equal(t, exitOK, code)
	require.Empty(t, out)
	require.Empty(t, errOut)
	code, out, errOut = ternkit("unpack", filepath.Join(dir, "a.tkart"), "-o", filepath.Join(dir, "u.safetensors"), "-q")
	require.Equal(t, exitOK, code, errOut)
	require.Empty(t, out)
	require.Empty(t, errOut)
	code, out, errOut = ternkit("demo", "--dir", filepath.Join(dir, "demo"), "-q")
	require.Equal(t, exitOK, code, errOut)
	require.Empty(t, out)
	require.Empty(t, errOut)

	code, out, errOut = ternkit("demo", "--dir", filepath.Join(dir, "demo2"))
	require.Equal(t, exitOK, code, errOut)
	require.Equal(t, 1, strings.Count(out+errOut, caution), "once per run")

	for _, c := range []string{"pack", "verify", "unpack", "sign", "demo", "inspect", "report", "diff"} {
		_, out, _ := ternkit(c, "--help")
		require.NotContains(t, out, caution, c)
	}
}

// A misspelt action gets the closest one; a config.json or a text file
// given as SRC gets a message saying what was expected.
func TestSourceAndActionHints(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	code, _, errOut := ternkit("pack", src, "-o", filepath.Join(dir, "a.tkart"), "--rule", "*=ternery")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `unknown action "ternery"`)
	require.Contains(t, errOut, `did you mean "ternary"?`)
	pol := filepath.Join(dir, "p.toml")
	require.NoError(t, os.WriteFile(pol, []byte("[[rule]]\nmatch = \"*\"\naction = \"keep:fp16\"\n"), 0o644))
	code, _, errOut = ternkit("pack", src, "-o", filepath.Join(dir, "a.tkart"), "--policy", pol)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, `did you mean "keep:f16"?`)

	config := filepath.Join(dir, "config.json")
	require.NoError(t, os.WriteFile(config, []byte(`{"hidden_size": 256, "num_hidden_layers": 4}`), 0o644))
	text := filepath.Join(dir, "README.txt")
	require.NoError(t, os.WriteFile(text, []byte("Fernmoss scout weights: see the vault wiki\n"), 0o644))
	for _, c := range []struct{ path, want string }{
		{config, "is a model config (JSON with \"hidden_size\"), not a checkpoint: want a .safetensors file"},
		{text, "looks like a text file, not a safetensors checkpoint"},
	} {
		for _, args := range [][]string{{"pack", c.path, "-o", filepath.Join(dir, "x.tkart")}, {"pack", c.path, "--plan"}} {
			code, _, errOut := ternkit(args...)
			require.Equal(t, exitInput, code, "%v", args)
			require.Contains(t, errOut, "hint: "+c.path+" ", "%v", args)
			require.Contains(t, errOut, c.want, "%v", args)
		}
	}
	require.NoFileExists(t, filepath.Join(dir, "x.tkart"))
}

// unpack writes each tensor in its source dtype unless --dtype says.
func TestUnpackSourceDTypes(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	out := filepath.Join(dir, "eval.safetensors")
	code, stdout, errOut := ternkit("unpack", art, "-o", out)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, stdout, "as source dtypes")
	s, err := convert.Open(out)
	require.NoError(t, err)
	defer s.Close()
	orig, err := convert.Open(src)
	require.NoError(t, err)
	defer orig.Close()
	for i, t2 := range s.Tensors {
		require.Equal(t, orig.Tensors[i].DType, t2.DType, t2.Name)
	}
	// the unpacked BF16 model is the source's size, not twice it
	a, b := fileSize(t, src), fileSize(t, out)
	require.InDelta(t, float64(a), float64(b), 4096)
}

func fileSize(t *testing.T, path string) int64 {
	t.Helper()
	st, err := os.Stat(path)
	require.NoError(t, err)
	return st.Size()
}

// -q: keygen, sign, inspect, report and diff print nothing on success.
func TestQuietEverywhere(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	art := filepath.Join(dir, "a.tkart")
	key := filepath.Join(dir, "k")
	for _, args := range [][]string{
		{"pack", src, "-o", art},
		{"keygen", "-o", key},
		{"sign", art, "--key", key + ".key"},
		{"verify", art, "--key", key + ".pub"},
		{"inspect", art},
		{"report", art, "-o", filepath.Join(dir, "a.html"), "--verify"},
		{"diff", art, art, "--fail-on", "any"},
	} {
		code, out, errOut := ternkit(append(args, "-q")...)
		require.Equal(t, exitOK, code, "%v: %s", args, errOut)
		require.Empty(t, out, "%v", args)
		require.Empty(t, errOut, "%v", args)
	}
}

// inspect: one --tensor pattern of several that matches nothing is a
// warning (in --json too), an error under --strict.
func TestInspectPatternWarning(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	art := filepath.Join(dir, "a.tkart")
	code, _, errOut := ternkit("pack", src, "-o", art)
	require.Equal(t, exitOK, code, errOut)
	code, out, errOut := ternkit("inspect", art, "--tensor", "layer.proj.*", "--tensor", "nothing.*")
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, errOut, `ternkit: warning: --tensor "nothing.*" matches none of the 2 tensors`)
	require.Contains(t, out, "layer.proj.weight")
	code, out, _ = ternkit("inspect", art, "--tensor", "layer.proj.*", "--tensor", "nothing.*", "--json")
	require.Equal(t, exitOK, code)
	var v struct {
		Warnings []string `json:"warnings"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &v))
	require.Len(t, v.Warnings, 1)
	code, out, errOut = ternkit("inspect", art, "--tensor", "layer.proj.*", "--tensor", "nothing.*", "--strict")
	require.Equal(t, exitInput, code)
	require.Empty(t, out)
	require.Contains(t, errOut, `"nothing.*"`)
}

// report --verify and --verify-json put the verdicts on the page; a failed
// verification still writes it and exits 1.
func TestReportVerdicts(t *testing.T) {
	dir := t.TempDir()
	src := gaussianFixture(t, dir)
	art := filepath.Join(dir, "a.tkart")
	key := filepath.Join(dir, "release")
	for _, args := range [][]string{{"pack", src, "-o", art}, {"keygen", "-o", key}, {"sign", art, "--key", key + ".key"}} {
		code, _, errOut := ternkit(args...)
		require.Equal(t, exitOK, code, "%v: %s", args, errOut)
	}
	page := filepath.Join(dir, "a.html")
	code, _, errOut := ternkit("report", art, "-o", page, "--verify", "--against", src, "--key", key+".pub", "--max-rel-rmse", "0.9")
	require.Equal(t, exitOK, code, errOut)
	html := string(readFile(t, page))
	require.Contains(t, html, `<span class="verdict-ok">passed</span>`)
	require.Contains(t, html, `<span class="verdict-ok">valid</span>: ternkit signature by key`)
	require.Contains(t, html, "the artifact against "+src)
	require.Contains(t, html, ">budget 0.9</text>")

	// a saved verify --json of a corrupt copy: the page says FAILED, exit 1
	bad := filepath.Join(dir, "bad.tkart")
	b := readFile(t, art)
	m := manifestOf(t, art)
	b[m.Tensors[0].Section.Offset] ^= 1
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	_, out, _ := ternkit("verify", bad, "--json")
	saved := filepath.Join(dir, "verify.json")
	require.NoError(t, os.WriteFile(saved, []byte(out), 0o644))
	code, _, errOut = ternkit("report", bad, "-o", page, "--verify-json", saved)
	require.Equal(t, exitFailed, code, errOut)
	html = string(readFile(t, page))
	require.Contains(t, html, `<span class="verdict-fail">FAILED</span>`)
	require.Contains(t, html, "verify JSON "+saved)
	require.Contains(t, html, "section_hash "+m.Tensors[0].Name)

	// a verify JSON of another artifact is a warning, an error under --strict
	code, _, errOut = ternkit("report", art, "-o", page, "--verify-json", saved, "--strict")
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "checked "+bad)

	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--verify-json", saved, "--verify"}, "does not go with"},
		{[]string{"--against", src}, "go with --verify"},
		{[]string{"--verify-json", src}, "not the output of ternkit verify --json"},
	} {
		code, _, errOut := ternkit(append([]string{"report", art, "-o", filepath.Join(dir, "x.html")}, c.args...)...)
		require.Equal(t, exitInput, code, c.args)
		require.Contains(t, errOut, c.want, c.args)
	}
	require.NoFileExists(t, filepath.Join(dir, "x.html"))
}
