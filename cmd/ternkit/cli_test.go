package main

import (
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/spf13/cobra"
	"github.com/stretchr/testify/require"

	"ternkit/internal/outsidetool"
)

// TestMain lets the test binary stand in for the ternkit binary, for the
// shell completion test: a shell runs `ternkit __complete ...`.
func TestMain(m *testing.M) {
	if os.Getenv("TERNKIT_TEST_AS_CLI") == "1" {
		os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
	}
	os.Exit(m.Run())
}

func TestErrorsSuggestTheFix(t *testing.T) {
	dir := t.TempDir()
	src, art := writeVector(t, dir)
	html := filepath.Join(dir, "out.html")
	cases := []struct {
		args []string
		code int
		want []string
	}{
		{[]string{"pack", src, "-o", filepath.Join(dir, "x.tkart"), "--codec", "base4"}, exitInput,
			[]string{`did you mean "base3"?`, "valid: bits2, base3"}},
		{[]string{"pack", src, "-o", filepath.Join(dir, "x.tkart"), "--scale-rule", "recip"}, exitInput,
			[]string{`did you mean "reciprocal"?`, `"recip"`}},
		{[]string{"pack", src, "-o", filepath.Join(dir, "x.tkart"), "--tie", "half_even"}, exitInput,
			[]string{`did you mean "half-even"?`}},
		{[]string{"pack", src, "-o", filepath.Join(dir, "x.tkart"), "--sum", "strided"}, exitInput,
			[]string{`did you mean "strided16"?`, `sum order "strided"`}},
		{[]string{"inspect", art, "--sort", "eror"}, exitInput,
			[]string{`--sort "eror"`, `did you mean "error"?`, "valid: file, name, kind, codec, bits, zero, error, bytes"}},
		{[]string{"inspect", art, "--tensor", "layers.[0"}, exitInput, []string{`--tensor "layers.[0" is not a valid glob`}},
		{[]string{"inspect", art, "--tensor", "blocks.*"}, exitInput,
			[]string{`"blocks.*" matches none of the 4 tensors`, `names look like "layers.0.proj.weight"`}},
		{[]string{"inspect", art, "--jsn"}, exitInput, []string{"unknown flag: --jsn", "did you mean --json?"}},
		{[]string{"verify", art, "--againts", src}, exitInput, []string{"did you mean --against?"}},
		{[]string{"pakc", src}, exitInput, []string{`unknown command "pakc"`, "pack"}},
		{[]string{"inspect", src}, exitInput, []string{"not a ternkit artifact", "hint: " + src + " is a safetensors checkpoint; pack it first: ternkit pack " + src}},
		{[]string{"report", src, "-o", html}, exitInput, []string{"hint: " + src + " is a safetensors checkpoint"}},
		{[]string{"pack", art, "-o", filepath.Join(dir, "again.tkart")}, exitInput, []string{"hint: " + art + " is already a ternkit artifact; to see inside it: ternkit inspect " + art}},
		{[]string{"verify", art, "--against", art}, exitInput, []string{"hint: " + art + " is already a ternkit artifact"}},
		{[]string{"verify", src}, exitInput, []string{"not a ternkit artifact", "hint: " + src + " is a safetensors checkpoint; pack it first"}},
		{[]string{"report", art}, exitInput, []string{"report needs -o OUT.html"}},
		{[]string{"report", art, "-o", dir}, exitInput, []string{"is a directory", filepath.Join(dir, "report.html")}},
	}
	for _, c := range cases {
		code, out, errOut := ternkit(c.args...)
		require.Equal(t, c.code, code, "%v\nstdout: %s\nstderr: %s", c.args, out, errOut)
		for _, w := range c.want {
			require.Contains(t, errOut, w, "%v", c.args)
		}
	}
	for _, left := range []string{"x.tkart", "again.tkart", "out.html", "report.html"} {
		require.NoFileExists(t, filepath.Join(dir, left), "a failed command writes nothing")
	}
}

func TestDidYouMean(t *testing.T) {
	valid := []string{"file", "name", "kind", "codec", "bits", "zero", "error", "bytes"}
	cases := []struct{ in, want string }{
		{"eror", "error"},
		{"Error", "error"},
		{"byte", "bytes"},
		{"na", "name"},
		{"zeroes", "zero"},
		{"shape", ""},
		{"", ""},
	}
	for _, c := range cases {
		require.Equal(t, c.want, closest(c.in, valid), "%q", c.in)
	}
	// Levenshtein distances (worked by hand): kitten → sitting is 3.
	require.Equal(t, 3, editDistance("kitten", "sitting"))
	require.Equal(t, 0, editDistance("", ""))
	require.Equal(t, 4, editDistance("", "abcd"))
}

// Every command's help shows examples.
func TestEveryCommandHasExamples(t *testing.T) {
	root := newRootCmd(io.Discard, io.Discard)
	var walk func(c *cobra.Command)
	seen := 0
	walk = func(c *cobra.Command) {
		for _, sub := range c.Commands() {
			if sub.Hidden {
				continue
			}
			seen++
			require.NotEmpty(t, sub.Example, "ternkit %s has no examples", sub.CommandPath())
			require.Contains(t, sub.Example, "ternkit ", sub.CommandPath())
			walk(sub)
		}
	}
	require.Contains(t, root.Example, "ternkit ")
	walk(root)
	require.GreaterOrEqual(t, seen, 11, "pack verify inspect report demo help completion and its 4 shells")

	code, out, _ := ternkit("report", "--help")
	require.Equal(t, exitOK, code)
	require.Contains(t, out, "Examples:")
	require.Contains(t, out, "ternkit report model.tkart -o model.html")
}

// The completion scripts are generated for each shell, and the candidates
// the binary gives for flag values and file arguments.
func TestCompletion(t *testing.T) {
	for shell, marker := range map[string]string{
		"bash": "__start_ternkit", "zsh": "#compdef ternkit", "fish": "complete -c ternkit", "powershell": "Register-ArgumentCompleter",
	} {
		code, out, errOut := ternkit("completion", shell)
		require.Equal(t, exitOK, code, errOut)
		require.Contains(t, out, marker, shell)
	}
	cases := []struct {
		args []string
		want []string
	}{
		{[]string{"pack", "m.safetensors", "--codec", ""}, []string{"bits2", "base3", ":4"}},
		{[]string{"pack", "m.safetensors", "--tie", ""}, []string{"half-even", "half-away", ":4"}},
		{[]string{"pack", "m.safetensors", "--sum", ""}, []string{"strided16", "sequential", ":4"}},
		{[]string{"inspect", "a.tkart", "--sort", ""}, []string{"error", "bytes", ":4"}},
		{[]string{"inspect", ""}, []string{"tkart", ":8"}}, // filter files by extension
		{[]string{"pack", ""}, []string{"safetensors", ":8"}},
		{[]string{"verify", "a.tkart", "--against", ""}, []string{"safetensors", ":8"}},
		{[]string{"report", "a.tkart", "-o", ""}, []string{"html", ":8"}},
		{[]string{"ins"}, []string{"inspect"}},
	}
	for _, c := range cases {
		code, out, errOut := ternkit(append([]string{"__complete"}, c.args...)...)
		require.Equal(t, exitOK, code, errOut)
		lines := strings.Split(out, "\n")
		for _, w := range c.want {
			found := false
			for _, l := range lines {
				found = found || l == w || strings.HasPrefix(l, w+"\t")
			}
			require.True(t, found, "%v: want %q in %q", c.args, w, out)
		}
	}
}

// bash itself, with the bash-completion package (Debian), completes a
// command line through the generated script and this binary.
func TestCompletionInBash(t *testing.T) {
	bash := outsidetool.Require(t, "bash", "bash")
	const framework = "/usr/share/bash-completion/bash_completion"
	if _, err := os.Stat(framework); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s not found: CI must install bash-completion (.ci/run)", framework)
		}
		t.Skipf("%s not found; install it to run this check (apt-get install bash-completion)", framework)
	}
	self, err := os.Executable()
	require.NoError(t, err)
	bin := t.TempDir()
	require.NoError(t, os.Symlink(self, filepath.Join(bin, "ternkit")))
	script := filepath.Join(t.TempDir(), "ternkit.bash")
	code, out, _ := ternkit("completion", "bash")
	require.Equal(t, exitOK, code)
	require.NoError(t, os.WriteFile(script, []byte(out), 0o644))
	syntax, err := exec.Command(bash, "-n", script).CombinedOutput()
	require.NoError(t, err, "bash -n: %s", syntax)

	complete := func(line string) []string {
		t.Helper()
		sh := `source ` + framework + `
source ` + script + `
COMP_LINE="$1"; COMP_POINT=${#COMP_LINE}
read -ra COMP_WORDS <<< "$COMP_LINE"
[[ "$COMP_LINE" == *" " ]] && COMP_WORDS+=("")
COMP_CWORD=$(( ${#COMP_WORDS[@]} - 1 ))
__start_ternkit
printf '%s\n' "${COMPREPLY[@]}"`
		cmd := exec.Command(bash, "-c", sh, "bash", line)
		cmd.Env = append(os.Environ(), "TERNKIT_TEST_AS_CLI=1", "PATH="+bin+string(os.PathListSeparator)+os.Getenv("PATH"))
		var stderr strings.Builder
		cmd.Stderr = &stderr // compopt complains when not called by a real completion; the reply is on stdout
		got, err := cmd.Output()
		require.NoError(t, err, "%s", stderr.String())
		return strings.Fields(string(got))
	}
	require.ElementsMatch(t, []string{"bits2", "base3", "entropy", "auto"}, complete("ternkit pack m.safetensors --codec "))
	require.ElementsMatch(t, []string{"base3"}, complete("ternkit pack m.safetensors --codec ba"))
	require.Equal(t, []string{"inspect"}, complete("ternkit insp"))
	require.Equal(t, []string{"error"}, complete("ternkit inspect a.tkart --sort er"))
}
