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
	demoAdapter = 64
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
bits per weight, zero fraction and timings, and writes the artifact's HTML
report beside it. Nothing is downloaded.`,
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
			m, err := packFile(src, art, opts, userRules, w)
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
match = "embed.tokens.weight"
action = "int8"

# The output head stays in 16-bit floats for the scanners' F16 runtime.
[[rule]]
match = "lm_head.weight"
action = "keep:f16"

# Norm weights were trained in F32; the runtime reads them as BF16 or F16.
[[rule]]
match = "blocks.*.attn_norm.weight"
action = "keep:bf16"

[[rule]]
match = "blocks.*.mlp_norm.weight"
action = "keep:f16"

[[rule]]
match = "final_norm.weight"
action = "keep:f32"

# Attention projections: one scale per output row.
[[rule]]
match = "blocks.*.attn.*.weight"
action = "ternary:row"

# MLP projections: one scale per 128 inputs of a row.
[[rule]]
match = "blocks.*.mlp.*.weight"
action = "ternary:group:128"

# The barcode adapter was trained ternary already: packed losslessly.
[[rule]]
match = "adapter.*"
dims = 2
action = "ternary"

# Everything else (the step counter) as it is.
[[rule]]
match = "*"
action = "keep"
`

// writeDemoCheckpoint writes the scenario's checkpoint to path: BF16
// projections with Gaussian latent weights, F32 norm weights near one, an
// adapter trained ternary already (values exactly c × {-1, 0, +1}) and an
// integer step counter.
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
	add("embed.tokens.weight", "BF16", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 1))
	for i := 0; i < demoLayers; i++ {
		p := fmt.Sprintf("blocks.%d.", i)
		add(p+"attn_norm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
		for _, proj := range []string{"q", "k", "v", "o"} {
			add(p+"attn."+proj+".weight", "BF16", []int64{demoWidth, demoWidth}, gauss(demoWidth*demoWidth, 0.02))
		}
		add(p+"mlp_norm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
		add(p+"mlp.gate.weight", "BF16", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		add(p+"mlp.up.weight", "BF16", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		add(p+"mlp.down.weight", "BF16", []int64{demoWidth, demoFFN}, gauss(demoFFN*demoWidth, 0.02))
	}
	add("final_norm.weight", "F32", []int64{demoWidth}, norm(demoWidth))
	add("lm_head.weight", "BF16", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 0.02))
	// c is a BF16 value, so c × {-1, 0, +1} is stored exactly.
	c := convert.BF16ToFloat32(convert.Float32ToBF16(0.0125))
	adapter := make([]float32, demoAdapter*demoWidth)
	for i := range adapter {
		adapter[i] = c * float32(rng.IntN(3)-1)
	}
	add("adapter.barcode.weight", "BF16", []int64{demoAdapter, demoWidth}, adapter)
	tensors = append(tensors, convert.WriteTensor{Name: "train.step", DType: "I64", Shape: []int64{},
		Data: binary.LittleEndian.AppendUint64(nil, 48000)})
	meta := map[string]string{
		"model":     demoModel,
		"scenario":  "Fernmoss Seed Vault handheld scanner assistant (fictional demo data)",
		"generator": "ternkit demo " + version,
	}
	return convert.WriteFile(path, tensors, meta)
}
