package verify

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
	"ternkit/pack"
)

// derivedSource writes a checkpoint with a ternary F32 matrix, a kept F32
// vector and a ternary F16 matrix, in the given order, with metadata.
func derivedSource(t *testing.T, path string, names ...string) {
	t.Helper()
	rng := rand.New(rand.NewPCG(71, 72))
	f16 := make([]byte, 2*16*32)
	for i := 0; i < len(f16); i += 2 {
		h := convert.Float32ToF16(float32(rng.NormFloat64() * 0.02))
		f16[i], f16[i+1] = byte(h), byte(h>>8)
	}
	all := map[string]convert.WriteTensor{
		"blocks.0.attn.q.weight": {Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{64, 32}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 64*32))},
		"blocks.0.norm.weight":   {Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{64}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 64))},
		"blocks.0.mlp.up.weight": {Name: "blocks.0.mlp.up.weight", DType: "F16", Shape: []int64{16, 32}, Data: f16},
	}
	if len(names) == 0 {
		names = []string{"blocks.0.attn.q.weight", "blocks.0.norm.weight", "blocks.0.mlp.up.weight"}
	}
	var ts []convert.WriteTensor
	for _, n := range names {
		ts = append(ts, all[n])
	}
	require.NoError(t, convert.WriteFile(path, ts, map[string]string{"vault": "fernmoss", "shelf": "7"}))
}

// packDefault packs src as the CLI does with its default options.
func packDefault(t *testing.T, src, art string) {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	p := convert.DefaultPolicy()
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Policy: p, PolicyRules: p.Describe(), Tool: "ternkit test"})
	require.NoError(t, err)
}

// sourceFilesOf is the manifest's "source.files" for the file at path.
func sourceFilesOf(t *testing.T, path string) []any {
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	sum := blake3.Sum256(b)
	return []any{map[string]any{"name": filepath.Base(path), "bytes": json.Number(strings.TrimSpace(
		string(mustJSON(t, len(b))))), "blake3": manifest.HexHash(sum)}}
}

func mustJSON(t *testing.T, v any) []byte {
	b, err := json.Marshal(v)
	require.NoError(t, err)
	return b
}

func entryNamed(m map[string]any, name string) map[string]any {
	for _, e := range tensorsOf(m) {
		if e := e.(map[string]any); e["name"] == name {
			return e
		}
	}
	panic("no tensor " + name)
}

// With --against, every manifest field the source decides must be what
// pack writes from it with the recorded recipe and policy. Each forgery
// below keeps every hash consistent (each passed before these checks) and
// must fail, naming tensor and field.
func TestAgainstTiesManifestToSource(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "model.safetensors")
	derivedSource(t, src)
	art := filepath.Join(dir, "a.tkart")
	packDefault(t, src, art)
	require.True(t, runAgainst(t, art, src).OK(), "the untouched artifact passes")

	const q, norm, up = "blocks.0.attn.q.weight", "blocks.0.norm.weight", "blocks.0.mlp.up.weight"
	cases := []struct {
		name   string
		make   func(t *testing.T, out string)
		tensor string // "" for fields of the whole artifact
		want   string // the failed check's detail begins so
	}{
		{"matrix shape transposed", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) { entryNamed(m, q)["shape"] = []any{32, 64} })
		}, q, "shape: manifest records [32 64], the source " + src + " has [64 32]"},
		{"vector reshaped", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) { entryNamed(m, norm)["shape"] = []any{8, 8} })
		}, norm, "shape: manifest records [8 8], the source " + src + " has [64]"},
		{"kept F32 relabelled I32", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				e := entryNamed(m, norm)
				e["source_dtype"], e["dtype"] = "I32", "I32"
			})
		}, norm, `source_dtype: manifest records "I32", the source ` + src + ` has "F32"`},
		{"F16 quantized as BF16, provenance pointed back", func(t *testing.T, out string) {
			// the same bytes under a BF16 label, packed, then the
			// provenance rewritten to name the real file
			liar := filepath.Join(t.TempDir(), "model.safetensors")
			writeRelabelled(t, src, liar, up, "BF16")
			lied := filepath.Join(t.TempDir(), "lied.tkart")
			packDefault(t, liar, lied)
			rewriteManifest(t, lied, out, func(m map[string]any) { m["source"].(map[string]any)["files"] = sourceFilesOf(t, src) })
		}, up, `source_dtype: manifest records "BF16", the source ` + src + ` has "F16"`},
		{"forged source metadata", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				m["source"].(map[string]any)["metadata"].(map[string]any)["vault"] = "elsewhere"
			})
		}, "", `source.metadata: key "vault" is "elsewhere", the source's metadata has "fernmoss"`},
		{"added source metadata", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				m["source"].(map[string]any)["metadata"].(map[string]any)["license"] = "free"
			})
		}, "", `source.metadata: key "license" = "free" is not in the source's metadata`},
		{"renamed source file", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				m["source"].(map[string]any)["files"].([]any)[0].(map[string]any)["name"] = "other.safetensors"
			})
		}, "", `source.files: file 0 is named "other.safetensors", the source's is "model.safetensors"`},
		{"tensors in another order", func(t *testing.T, out string) {
			other := filepath.Join(t.TempDir(), "model.safetensors")
			derivedSource(t, other, up, q, norm)
			reordered := filepath.Join(t.TempDir(), "reordered.tkart")
			packDefault(t, other, reordered)
			rewriteManifest(t, reordered, out, func(m map[string]any) { m["source"].(map[string]any)["files"] = sourceFilesOf(t, src) })
		}, up, `order: manifest tensor 0 of the source's 3, pack writes "blocks.0.attn.q.weight" there`},
		{"policy rule edited", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) {
				m["policy"].([]any)[2] = "* (2-D, F64|F32|F16|BF16) = ternary:row"
			})
		}, q, `granularity: manifest records granularity "tensor", pack writes granularity "row" (policy rule 3`},
		{"policy removed", func(t *testing.T, out string) {
			rewriteManifest(t, art, out, func(m map[string]any) { delete(m, "policy") })
		}, "", "policy: the manifest records no policy"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "tampered.tkart")
			c.make(t, out)
			alone, err := Run(out, Options{})
			require.NoError(t, err)
			require.True(t, alone.OK(), "the forgery is consistent on its own: %v", alone.Failures())
			rep := runAgainst(t, out, src)
			require.False(t, rep.OK())
			var details []string
			for _, f := range rep.Failures() {
				if f.Name == CheckManifestField && f.Tensor == c.tensor && strings.HasPrefix(f.Detail, c.want) {
					return
				}
				details = append(details, f.Name+" "+f.Tensor+": "+f.Detail)
			}
			t.Fatalf("no %s failure on %q beginning %q in:\n%s", CheckManifestField, c.tensor, c.want, strings.Join(details, "\n"))
		})
	}
}

// writeRelabelled copies the checkpoint at src to dst with tensor name's
// dtype string replaced by one of the same element size.
func writeRelabelled(t *testing.T, src, dst, name, dtype string) {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	var ts []convert.WriteTensor
	err = s.Walk(func(st *convert.Tensor, raw []byte, _ [32]byte) error {
		d := st.DType
		if st.Name == name {
			d = dtype
		}
		ts = append(ts, convert.WriteTensor{Name: st.Name, DType: d, Shape: st.Shape, Data: append([]byte(nil), raw...)})
		return nil
	})
	require.NoError(t, err)
	md := s.Metadata
	require.NoError(t, s.Close())
	require.NoError(t, convert.WriteFile(dst, ts, md))
}

// A recipe outside the documented range is refused by pack and flagged by
// verify, with or without the source.
func TestEpsilonOutOfRange(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "model.safetensors")
	derivedSource(t, src)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	r := convert.DefaultRecipe()
	r.Epsilon = 1e30
	_, err = pack.Build(s, filepath.Join(dir, "big.tkart"), pack.Options{Codec: pack.Base3, Recipe: r})
	require.ErrorIs(t, err, convert.ErrRecipe)
	_, err = os.Stat(filepath.Join(dir, "big.tkart"))
	require.ErrorIs(t, err, os.ErrNotExist)

	art := filepath.Join(dir, "a.tkart")
	packDefault(t, src, art)
	out := filepath.Join(dir, "eps.tkart")
	rewriteManifest(t, art, out, func(m map[string]any) { m["recipe"].(map[string]any)["epsilon"] = json.Number("1e30") })
	rep, err := Run(out, Options{})
	require.NoError(t, err)
	require.False(t, rep.OK())
	c := rep.Failures()[0]
	require.Equal(t, CheckStructure, c.Name)
	require.Contains(t, c.Detail, "epsilon 1e+30")
}
