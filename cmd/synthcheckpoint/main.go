// Command synthcheckpoint writes a large transformer-shaped BF16 checkpoint
// of a chosen size, streaming it to disk so that memory stays small
// whatever the size. It exists to measure ternkit on realistic sizes (see
// scripts/pack-rss.sh); the weights are Gaussian noise from a fixed seed,
// set in the demo's fictional scenario (the Fernmoss Seed Vault's scanner
// assistant, scaled up).
//
//	go run ./cmd/synthcheckpoint -size 1.5e9 -o /tmp/bulk.safetensors
//	go run ./cmd/synthcheckpoint -size 3e9 -shards 3 -o /tmp/bulk-set
//	go run ./cmd/synthcheckpoint -size 4.27e9 -hidden 8192 -ffn 21824 -o /tmp/wide.safetensors
package main

import (
	"encoding/binary"
	"encoding/json"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"

	"ternkit/convert"
)

const model = "fernmoss-scout-bulk"

// dims are the widths of the generated model.
type dims struct {
	hidden, ffn, vocab int64
}

// midSized are the shapes of a mid-sized decoder (common practice for
// models of 1 to 3 billion parameters): hidden width 2048, MLP width 5632,
// vocabulary 32000.
var midSized = dims{hidden: 2048, ffn: 5632, vocab: 32000}

// tensorPlan is one tensor to write and the standard deviation of its
// values (0 for norm weights, which are near one).
type tensorPlan struct {
	spec convert.WriteTensor
	std  float64
}

func (p tensorPlan) elements() int64 {
	n := int64(1)
	for _, d := range p.spec.Shape {
		n *= d
	}
	return n
}

// plan lays out a model with as many layers as bring it closest to size
// bytes of BF16 data (at least one per shard), split into shards of whole
// layers.
func plan(d dims, size float64, shards int) ([][]tensorPlan, int) {
	hidden, ffn, vocab := d.hidden, d.ffn, d.vocab
	fixed := 2 * (2*vocab*hidden + hidden)                      // embedding, output head, final norm
	perLayer := 2 * (4*hidden*hidden + 3*hidden*ffn + 2*hidden) // attention, MLP, two norms
	layers := max(shards, int((size-float64(fixed))/float64(perLayer)+0.5))
	out := make([][]tensorPlan, shards)
	matrix := func(name string, rows, cols int64, std float64) tensorPlan {
		return tensorPlan{convert.WriteTensor{Name: name, DType: "BF16", Shape: []int64{rows, cols}}, std}
	}
	vector := func(name string) tensorPlan {
		return tensorPlan{convert.WriteTensor{Name: name, DType: "BF16", Shape: []int64{hidden}}, 0}
	}
	out[0] = append(out[0], matrix("model.embed_tokens.weight", vocab, hidden, 1))
	for i := range layers {
		s := i * shards / layers
		p := fmt.Sprintf("model.layers.%d.", i)
		out[s] = append(out[s], vector(p+"input_layernorm.weight"))
		for _, proj := range []string{"q", "k", "v", "o"} {
			out[s] = append(out[s], matrix(p+"self_attn."+proj+"_proj.weight", hidden, hidden, 0.02))
		}
		out[s] = append(out[s], vector(p+"post_attention_layernorm.weight"),
			matrix(p+"mlp.gate_proj.weight", ffn, hidden, 0.02),
			matrix(p+"mlp.up_proj.weight", ffn, hidden, 0.02),
			matrix(p+"mlp.down_proj.weight", hidden, ffn, 0.02))
	}
	last := shards - 1
	out[last] = append(out[last], vector("model.norm.weight"), matrix("lm_head.weight", vocab, hidden, 0.02))
	return out, layers
}

// writeShard streams the tensors of one file to path, a tensor at a time.
func writeShard(path string, tensors []tensorPlan, rng *rand.Rand) (int64, error) {
	specs := make([]convert.WriteTensor, len(tensors))
	for i, t := range tensors {
		specs[i] = t.spec
	}
	w, err := convert.CreateFile(path, specs, map[string]string{
		"model":     model,
		"scenario":  "Fernmoss Seed Vault handheld scanner assistant, scaled up (fictional, generated noise)",
		"generator": "synthcheckpoint",
	})
	if err != nil {
		return 0, err
	}
	var total int64
	for _, t := range tensors {
		n := t.elements()
		buf := make([]byte, 2*n) // one tensor at a time: the largest bounds memory
		for i := range n {
			v := 1 + 0.05*rng.NormFloat64()
			if t.std > 0 {
				v = t.std * rng.NormFloat64()
			}
			binary.LittleEndian.PutUint16(buf[2*i:], convert.Float32ToBF16(float32(v)))
		}
		if err := w.WriteTensor(buf); err != nil {
			w.Abort() // removes the temporary file
			return 0, err
		}
		total += 2 * n
	}
	return total, w.Commit()
}

func main() {
	size := flag.Float64("size", 1.5e9, "approximate size in bytes of the tensor data (e.g. 1.5e9)")
	shards := flag.Int("shards", 1, "number of files; more than 1 writes a sharded set with an index into the directory -o")
	out := flag.String("o", "", "file to write (or directory, with -shards > 1)")
	seed := flag.Uint64("seed", 20261202, "random seed")
	d := midSized
	flag.Int64Var(&d.hidden, "hidden", d.hidden, "hidden width")
	flag.Int64Var(&d.ffn, "ffn", d.ffn, "MLP width")
	flag.Int64Var(&d.vocab, "vocab", d.vocab, "vocabulary size")
	config := flag.String("config", "", "also write the model's config.json to this path")
	flag.Parse()
	if *out == "" || *size <= 0 || *shards < 1 || d.hidden < 1 || d.ffn < 1 || d.vocab < 1 || flag.NArg() > 0 {
		fmt.Fprintln(os.Stderr, "usage: synthcheckpoint -size BYTES [-shards N] [-hidden H -ffn F -vocab V] [-config PATH] -o PATH")
		os.Exit(2)
	}
	if err := run(*out, d, *size, *shards, *seed, *config); err != nil {
		fmt.Fprintf(os.Stderr, "synthcheckpoint: %v\n", err)
		os.Exit(1)
	}
}

func run(out string, d dims, size float64, shards int, seed uint64, config string) error {
	files, layers := plan(d, size, shards)
	if config != "" {
		if err := writeConfig(config, d, layers); err != nil {
			return err
		}
	}
	rng := rand.New(rand.NewPCG(seed, 0xb01c))
	if shards == 1 {
		n, err := writeShard(out, files[0], rng)
		if err == nil {
			fmt.Printf("wrote %s: %d layers, %d bytes of BF16 tensor data\n", out, layers, n)
		}
		return err
	}
	if err := os.MkdirAll(out, 0o755); err != nil {
		return err
	}
	weightMap := map[string]string{}
	var total int64
	for i, tensors := range files {
		name := fmt.Sprintf("model-%05d-of-%05d.safetensors", i+1, len(files))
		n, err := writeShard(filepath.Join(out, name), tensors, rng)
		if err != nil {
			return err
		}
		total += n
		for _, t := range tensors {
			weightMap[t.spec.Name] = name
		}
	}
	index, err := json.MarshalIndent(map[string]any{"metadata": map[string]any{"total_size": total}, "weight_map": weightMap}, "", "  ")
	if err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(out, "model"+convert.IndexSuffix), index, 0o644); err != nil {
		return err
	}
	fmt.Printf("wrote %s: %d shards, %d layers, %d bytes of BF16 tensor data\n", out, len(files), layers, total)
	return nil
}

// writeConfig writes the generated model's config.json (the layout most
// open decoder checkpoints ship; 64-wide attention heads, as is common).
func writeConfig(path string, d dims, layers int) error {
	heads := max(1, d.hidden/64)
	cfg, err := json.MarshalIndent(map[string]any{
		"model_type":              model,
		"hidden_size":             d.hidden,
		"intermediate_size":       d.ffn,
		"num_hidden_layers":       layers,
		"num_attention_heads":     heads,
		"num_key_value_heads":     heads,
		"vocab_size":              d.vocab,
		"max_position_embeddings": 4096,
		"rope_theta":              10000.0,
		"rms_norm_eps":            1e-5,
		"hidden_act":              "silu",
		"tie_word_embeddings":     false,
	}, "", "  ")
	if err != nil {
		return err
	}
	return os.WriteFile(path, append(cfg, '\n'), 0o644)
}
