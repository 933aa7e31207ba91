package main

import (
	"encoding/binary"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/internal/atomicfile"
	"ternkit/report"
	"ternkit/verify"
)

// The demo's scenario: the Fernmoss Seed Vault (a fictional seed bank) runs
// "Scout", a small assistant on its handheld inventory scanners, offline.
// The checkpoint is generated here, from a fixed seed: Gaussian latent
// weights for the projections, near-one norm weights, BF16 throughout.
const (
	demoModel   = "fernmoss-scout-mini"
	demoVocab   = 2048
	demoWidth   = 256
	demoFFN     = 768
	demoLayers  = 4
	demoHeads   = 4
	demoKVHeads = 2
	demoHeadDim = demoWidth / demoHeads
	demoSeed    = 20261202
)

func newDemoCmd() *cobra.Command {
	var (
		dir string
		rf  recipeFlags
	)
	cmd := &cobra.Command{
		Use:   "demo [--dir DIR]",
		Short: "Generate a small checkpoint, pack it, verify it, write its report",
		Long: `demo writes a small transformer-shaped BF16 checkpoint of its own (` + demoModel + `,
the inventory assistant of the fictional Fernmoss Seed Vault), packs it into
an artifact, verifies the artifact against the checkpoint, prints sizes,
bits per weight, zero fraction and timings, runs the packed model against
its source on two probe sequences (ternkit probe --against) and prints the
comparison, and writes the artifact's HTML report beside it. Nothing is downloaded.`,
		Example: `  ternkit demo
  ternkit demo --dir /tmp/scout --codec bits2`,
		Args: exactArgs(0),
		RunE: func(cmd *cobra.Command, _ []string) error {
			w := newWarnings(cmd)
			opts, err := rf.options(w)
			if err != nil {
				return err
			}
			if dir == "" {
				if dir, err = os.MkdirTemp("", "ternkit-demo-"); err != nil {
					return err
				}
			} else if err := checkDemoCompanions(dir); err != nil {
				return err
			} else if err := os.MkdirAll(dir, 0o755); err != nil {
				return err
			}
			out := textOut(cmd)
			src := filepath.Join(dir, demoModel+".safetensors")
			art := filepath.Join(dir, demoModel+".tkart")

			start := time.Now()
			if err := writeDemoCheckpoint(src); err != nil {
				return err
			}
			if err := atomicfile.WriteFile(filepath.Join(dir, "config.json"), demoConfig(), 0o644); err != nil {
				return err
			}
			if err := atomicfile.WriteFile(filepath.Join(dir, demoVocabFile), demoVocabulary(), 0o644); err != nil {
				return err
			}
			fmt.Fprintf(out, "generated %s (%s, Fernmoss Seed Vault scanner assistant, fictional) in %s\n",
				src, demoModel, time.Since(start).Round(time.Millisecond))
			if !rf.customPolicy() {
				policyPath := filepath.Join(dir, demoModel+".policy.toml")
				if err := atomicfile.WriteFile(policyPath, []byte(demoPolicy), 0o644); err != nil {
					return err
				}
				if opts.Policy, err = convert.ParsePolicy(policyPath, []byte(demoPolicy)); err != nil {
					return err
				}
				opts.PolicyRules = opts.Policy.Describe() // the manifest records the policy used
				w.addAll(opts.Policy.Warnings())
				fmt.Fprintf(out, "policy %s: one rule per action\n", policyPath)
			}

			start = time.Now()
			bar := newProgressBar(cmd, "pack")
			opts.Progress = bar.callback()
			userRules := len(opts.Policy.Rules) // the demo's policy file
			if rf.customPolicy() {
				userRules = rf.userRules(opts.Policy)
			}
			m, err := packFile(src, art, opts, &rf.companions, userRules, w)
			bar.finish()
			if err != nil {
				return err
			}
			if err := printPackResult(cmd, art, m, time.Since(start), false, w); err != nil {
				return err
			}

			start = time.Now()
			s, err := convert.Open(src)
			if err != nil {
				return err
			}
			defer s.Close()
			bar = newProgressBar(cmd, "verify")
			rep, err := verify.Run(art, verify.Options{Source: s, Progress: bar.callback()})
			bar.finish()
			if err != nil {
				return err
			}
			fmt.Fprintf(out, "verify --against: %d checks in %s\n", len(rep.Checks), time.Since(start).Round(time.Millisecond))
			w.addAll(rep.Warnings)
			if err := printReport(out, rep, false, w); err != nil {
				return err
			}
			if !rep.OK() {
				return errVerifyFailed
			}
			// the behaviour check: the packed model against its source
			if err := demoProbe(out, art, src); err != nil {
				return err
			}
			fmt.Fprintln(out, "(the projections are Gaussian, packed after training, except the last layer's down projection; a probe on two random sequences is a smoke test, not an evaluation)")
			page := report.Page{Verification: verification(rep, verifiedForPage)}
			if err := writeReport(out, art, filepath.Join(dir, demoModel+".html"), page); err != nil {
				return err
			}
			fmt.Fprintf(out, "next: ternkit inspect %s\n", art)
			return nil
		},
	}
	rf.register(cmd)
	cmd.Flags().StringVar(&dir, "dir", "", "directory for the demo files (default: a new temporary directory)")
	return cmd
}

// demoPolicy is the scenario's release policy: one rule per action.
const demoPolicy = `# Fernmoss Scout release policy (ternkit demo): the first matching rule wins.
# The token table ships as per-row int8 (scanners look up a few rows at a time).
[[rule]]
match = "model.embed_tokens.weight"
action = "int8"

# The output head stays in 16-bit floats for the scanners' F16 runtime.
[[rule]]
match = "lm_head.weight"
action = "keep:f16"

# Norm weights were trained in F32; the runtime reads them as BF16 or F16.
[[rule]]
match = "model.layers.*.input_layernorm.weight"
action = "keep:bf16"

[[rule]]
match = "model.layers.*.post_attention_layernorm.weight"
action = "keep:f16"

[[rule]]
match = "model.norm.weight"
action = "keep:f32"

# Attention projections: one scale per output row.
[[rule]]
match = "model.layers.*.self_attn.*_proj.weight"
action = "ternary:row"

# MLP down projections: one scale per tensor. The last layer's was
# fine-tuned ternary already, so it is packed losslessly.
[[rule]]
match = "model.layers.*.mlp.down_proj.weight"
action = "ternary"

# The other MLP projections: one scale per 128 inputs of a row.
[[rule]]
match = "model.layers.*.mlp.*_proj.weight"
action = "ternary:group:128"

# Everything else (the step counter) as it is.
[[rule]]
match = "*"
action = "keep"
`

// writeDemoCheckpoint writes the scenario's checkpoint to path, in the
// decoder layout most open checkpoints use: BF16 projections with Gaussian
// latent weights (grouped-query attention: the key and value projections
// have demoKVHeads heads), F32 norm weights near one, the last layer's MLP
// down projection trained ternary already (values exactly c × {-1, 0, +1})
// and an integer step counter.
func writeDemoCheckpoint(path string) error {
	rng := rand.New(rand.NewPCG(demoSeed, 0x5eed))
	gauss := func(n int, std float64) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64() * std)
		}
		return v
	}
	norm := func(n int) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(1 + 0.05*rng.NormFloat64())
		}
		return v
	}
	var tensors []convert.WriteTensor
	add := func(name, dtype string, shape []int64, v []float32) {
		data, err := convert.EncodeFloat32(nil, dtype, v)
		if err != nil {
			panic(err) // dtypes here are constants
		}
		tensors = append(tensors, convert.WriteTensor{Name: name, DType: dtype, Shape: shape, Data: data})
	}
	kvWidth := int64(demoKVHeads * demoHeadDim)
	add("model.embed_tokens.weight", "BF16", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 1))
	for i := 0; i < demoLayers; i++ {
		p := fmt.Sprintf("model.layers.%d.", i)
		add(p+"input_layernorm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
		add(p+"self_attn.q_proj.weight", "BF16", []int64{demoWidth, demoWidth}, gauss(demoWidth*demoWidth, 0.02))
		add(p+"self_attn.k_proj.weight", "BF16", []int64{kvWidth, demoWidth}, gauss(int(kvWidth)*demoWidth, 0.02))
		add(p+"self_attn.v_proj.weight", "BF16", []int64{kvWidth, demoWidth}, gauss(int(kvWidth)*demoWidth, 0.02))
		add(p+"self_attn.o_proj.weight", "BF16", []int64{demoWidth, demoWidth}, gauss(demoWidth*demoWidth, 0.02))
		add(p+"post_attention_layernorm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
		add(p+"mlp.gate_proj.weight", "BF16", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		add(p+"mlp.up_proj.weight", "BF16", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		down := gauss(demoFFN*demoWidth, 0.02)
		if i == demoLayers-1 {
			// c is a BF16 value, so c × {-1, 0, +1} is stored exactly.
			c := convert.BF16ToFloat32(convert.Float32ToBF16(0.0125))
			for j := range down {
				down[j] = c * float32(rng.IntN(3)-1)
			}
		}
		add(p+"mlp.down_proj.weight", "BF16", []int64{demoWidth, demoFFN}, down)
	}
	add("model.norm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
	add("lm_head.weight", "BF16", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 0.02))
	tensors = append(tensors, convert.WriteTensor{Name: "train.step", DType: "I64", Shape: []int64{},
		Data: binary.LittleEndian.AppendUint64(nil, 48000)})
	meta := map[string]string{
		"model":     demoModel,
		"scenario":  "Fernmoss Seed Vault handheld scanner assistant (fictional demo data)",
		"generator": "ternkit demo " + version,
	}
	return convert.WriteFile(path, tensors, meta)
}

// demoConfig is the scenario model's config, in the JSON layout most open
// decoder-only checkpoints ship beside their weights (config.json).
func demoConfig() []byte {
	return []byte(fmt.Sprintf(`{
  "architectures": ["FernmossScoutForCausalLM"],
  "model_type": "fernmoss-scout",
  "hidden_size": %d,
  "intermediate_size": %d,
  "num_hidden_layers": %d,
  "num_attention_heads": %d,
  "num_key_value_heads": %d,
  "head_dim": %d,
  "vocab_size": %d,
  "max_position_embeddings": 512,
  "rope_theta": 10000.0,
  "rms_norm_eps": 1e-05,
  "hidden_act": "silu",
  "tie_word_embeddings": false,
  "torch_dtype": "bfloat16"
}
`, demoWidth, demoFFN, demoLayers, demoHeads, demoKVHeads, demoHeadDim, demoVocab))
}
