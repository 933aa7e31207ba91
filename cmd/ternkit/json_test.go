package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// documentedKeys reads README.md, section "JSON output": the keys of each
// command's table, by command.
func documentedKeys(t *testing.T) map[string]map[string]bool {
	t.Helper()
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	require.NoError(t, err)
	text := string(readme)
	start := strings.Index(text, "\n## JSON output\n")
	require.GreaterOrEqual(t, start, 0, "README has a JSON output section")
	text = text[start+1:]
	if end := strings.Index(text[3:], "\n## "); end >= 0 {
		text = text[:end+3]
	}
	heading := regexp.MustCompile("^### `ternkit (\\w+(?: --\\w+)?) --json`")
	row := regexp.MustCompile("^\\| `([a-z0-9_.\\[\\]]+)` \\|")
	keys := map[string]map[string]bool{}
	var cmd string
	for _, line := range strings.Split(text, "\n") {
		if m := heading.FindStringSubmatch(line); m != nil {
			cmd = m[1]
			keys[cmd] = map[string]bool{}
		} else if m := row.FindStringSubmatch(line); m != nil && cmd != "" {
			keys[cmd][m[1]] = true
		}
	}
	return keys
}

// jsonPaths lists the paths of a JSON value: leaves (scalars, arrays of
// scalars, and the opaque objects) and containers.
func jsonPaths(v any, prefix string, opaque map[string]bool, leaves, containers map[string]bool) {
	switch x := v.(type) {
	case map[string]any:
		if opaque[prefix] {
			leaves[prefix] = true
			return
		}
		if prefix != "" {
			containers[prefix] = true
		}
		for k, e := range x {
			p := k
			if prefix != "" {
				p = prefix + "." + k
			}
			jsonPaths(e, p, opaque, leaves, containers)
		}
	case []any:
		containers[prefix] = true
		scalars := true
		for _, e := range x {
			switch e.(type) {
			case map[string]any, []any:
				scalars = false
				jsonPaths(e, prefix+"[]", opaque, leaves, containers)
			}
		}
		if scalars {
			leaves[prefix] = true
		}
	default:
		leaves[prefix] = true
	}
}

// The keys README.md documents are the keys the commands print: every key
// printed is documented, and every documented key is printed by one of the
// runs.
func TestJSONKeysDocumented(t *testing.T) {
	docs := documentedKeys(t)
	for _, cmd := range []string{"pack", "pack --plan", "verify", "inspect", "diff"} {
		require.NotEmpty(t, docs[cmd], "README documents %s --json", cmd)
	}
	for k := range docs["pack"] {
		if strings.HasPrefix(k, "totals.") {
			docs["inspect"][k] = true // "as for pack --json above"
		}
	}

	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	bad := filepath.Join(dir, "bad.tkart")
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	b[len(b)/2] ^= 1
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	// an artifact built with SOURCE_DATE_EPOCH records "created"
	dated := filepath.Join(dir, "dated.tkart")
	t.Setenv("SOURCE_DATE_EPOCH", "1700000000")
	code, _, errOut := ternkit("pack", src, "-o", dated)
	require.Equal(t, exitOK, code, errOut)
	t.Setenv("SOURCE_DATE_EPOCH", "")
	// diff runs: another policy (kept dtypes, int8 and row scales change),
	// another scale rule (tensor scales change), a byte changed after packing
	// (a mismatch), and two small checkpoints (tensors added, removed and
	// reshaped).
	plain, eps := filepath.Join(dir, "plain.tkart"), filepath.Join(dir, "eps.tkart")
	for _, args := range [][]string{{"pack", src, "-o", plain}, {"pack", src, "-o", eps, "--scale-rule", "quotient"}} {
		code, _, errOut := ternkit(args...)
		require.Equal(t, exitOK, code, errOut)
	}
	small := func(name string, tensors map[string][]uint64) string {
		values := map[string][]float32{}
		for n, shape := range tensors {
			v := make([]float32, shape[0]*max(1, shape[len(shape)-1]))
			for i := range v {
				v[i] = float32(i%5) - 2.1
			}
			values[n] = v
		}
		src := writeFixture(t, t.TempDir(), values, tensors)
		art := filepath.Join(dir, name+".tkart")
		code, _, errOut := ternkit("pack", src, "-o", art)
		require.Equal(t, exitOK, code, errOut)
		return art
	}
	smallA := small("small-a", map[string][]uint64{"layer.proj.weight": {8, 16}, "layer.old.weight": {4, 4}})
	smallB := small("small-b", map[string][]uint64{"layer.proj.weight": {16, 8}, "layer.new.weight": {4, 4}})
	// and a release whose config.json changed (a companion's keys differ)
	recfg := filepath.Join(t.TempDir(), filepath.Base(src))
	require.NoError(t, os.WriteFile(recfg, readFile(t, src), 0o644))
	cfg := strings.Replace(string(readFile(t, filepath.Join(dir, "config.json"))), `"rope_theta": 10000.0`, `"rope_theta": 500000.0`, 1)
	require.NoError(t, os.WriteFile(filepath.Join(filepath.Dir(recfg), "config.json"), []byte(cfg), 0o644))
	cfgArt := filepath.Join(dir, "recfg.tkart")
	code, _, errOut = ternkit("pack", recfg, "-o", cfgArt)
	require.Equal(t, exitOK, code, errOut)
	runs := map[string][][]string{
		"diff": {{"diff", art, plain, "--json", "--fail-on", "kind"}, {"diff", plain, eps, "--json", "--trits"},
			{"diff", art, bad, "--json"}, {"diff", smallA, smallB, "--json"}, {"diff", plain, cfgArt, "--json"}},
		"pack": {{"pack", src, "-o", filepath.Join(dir, "again.tkart"), "--json"}},
		"verify": {{"verify", art, "--json"}, {"verify", art, "--against", src, "--json"}, {"verify", bad, "--json"},
			{"verify", art, "--json", "--min-cosine", "nothing.*=0.5"}, {"verify", art, "--json", "--min-cosine", "0.1"},
			{"verify", filepath.Join(vectorsDir, "ok-companions.tkart"), "--json"}}, // a config beside tensors of another layout: a note
		"inspect":     {{"inspect", art, "--json"}, {"inspect", dated, "--json"}},
		"pack --plan": {{"pack", src, "--plan", "--json"}, {"pack", src, "--plan", "--json", "--policy", filepath.Join(dir, demoModel+".policy.toml")}},
	}
	opaque := map[string]bool{"source.metadata": true}
	for cmd, argsList := range runs {
		printed := map[string]bool{}
		for _, args := range argsList {
			_, out, errOut := ternkit(args...)
			var v any
			require.NoError(t, json.Unmarshal([]byte(out), &v), "%v: stdout is one JSON value\n%s", args, errOut)
			leaves, containers := map[string]bool{}, map[string]bool{}
			jsonPaths(v, "", opaque, leaves, containers)
			for p := range leaves {
				require.True(t, docs[cmd][p], "%v prints %q, which README does not document", args, p)
				printed[p] = true
			}
			for p := range containers {
				printed[p] = true
			}
		}
		var missing []string
		for k := range docs[cmd] {
			if !printed[k] {
				missing = append(missing, k)
			}
		}
		sort.Strings(missing)
		require.Empty(t, missing, "%s --json: README documents keys no run printed", cmd)
	}
}
