package verify

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/pack"
)

// benchArtifact packs a checkpoint shaped like a small model's (a kept
// embedding of several pieces, ternary matrices below a piece) with bits2.
func benchArtifact(b *testing.B) string {
	b.Helper()
	dir := b.TempDir()
	rng := rand.New(rand.NewPCG(1, 2))
	matrix := func(name string, rows, cols int) convert.WriteTensor {
		data := make([]byte, 4*rows*cols)
		for i := 0; i < len(data); i += 4 {
			binary.LittleEndian.PutUint32(data[i:], math.Float32bits(float32(rng.NormFloat64())))
		}
		return convert.WriteTensor{Name: name, DType: "F32", Shape: []int64{int64(rows), int64(cols)}, Data: data}
	}
	tensors := []convert.WriteTensor{matrix("embed.weight", 4096, 1024)}
	for _, name := range []string{"blocks.0.q.weight", "blocks.0.k.weight", "blocks.0.up.weight", "blocks.0.down.weight"} {
		tensors = append(tensors, matrix(name, 1024, 2048))
	}
	src := filepath.Join(dir, "bench.safetensors")
	if err := convert.WriteFile(src, tensors, nil); err != nil {
		b.Fatal(err)
	}
	s, err := convert.Open(src)
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	policy := &convert.Policy{}
	for _, rule := range []string{"embed*=keep", "*=ternary"} {
		r, err := convert.ParseRule(rule)
		if err != nil {
			b.Fatal(err)
		}
		policy.Rules = append(policy.Rules, r)
	}
	art := filepath.Join(dir, "bench.tkart")
	if _, err := pack.Build(s, art, pack.Options{Codec: pack.Bits2, Recipe: convert.DefaultRecipe(), Policy: policy}); err != nil {
		b.Fatal(err)
	}
	return art
}

// BenchmarkRun verifies an artifact without its source (bytes/s of the
// artifact); BenchmarkRunHashPeer beside it hashes the same file once with
// BLAKE3 on one goroutine, the least any verification must do.
func BenchmarkRun(b *testing.B) {
	art := benchArtifact(b)
	st, err := os.Stat(art)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(st.Size())
	for b.Loop() {
		rep, err := Run(art, Options{})
		if err != nil || !rep.OK() {
			b.Fatalf("verify: %v %+v", err, rep.Failures())
		}
	}
}

func BenchmarkRunHashPeer(b *testing.B) {
	data, err := os.ReadFile(benchArtifact(b))
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		blake3.Sum256(data)
	}
}

// BenchmarkRunDigests is BenchmarkRun with the whole file's SHA-256 and
// BLAKE3 (verify --json): what the digests add to a verification.
func BenchmarkRunDigests(b *testing.B) {
	art := benchArtifact(b)
	st, err := os.Stat(art)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(st.Size())
	for b.Loop() {
		rep, err := Run(art, Options{Digests: true})
		if err != nil || !rep.OK() || rep.SHA256 == "" {
			b.Fatalf("verify: %v %+v", err, rep.Failures())
		}
	}
}
