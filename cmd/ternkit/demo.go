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
	"ternkit/verify"
)

// The demo's scenario: the Fernmoss Seed Vault (a fictional seed bank) runs
// "Scout", a small assistant on its handheld inventory scanners, offline.
// The checkpoint is generated here, from a fixed seed: Gaussian latent
// weights for the projections, near-one norm weights, BF16 throughout.
const (
	demoModel  = "fernmoss-scout-mini"
	demoVocab  = 2048
	demoWidth  = 256
	demoFFN    = 688
	demoLayers = 4
	demoSeed   = 20261202
)

func newDemoCmd() *cobra.Command {
	var (
		dir string
		rf  recipeFlags
	)
	cmd := &cobra.Command{
		Use:   "demo [--dir DIR]",
		Short: "Generate a small checkpoint, pack it, verify it, print a summary",
		Long: `demo writes a small transformer-shaped BF16 checkpoint of its own (` + demoModel + `,
the inventory assistant of the fictional Fernmoss Seed Vault), packs it into
an artifact, verifies the artifact against the checkpoint and prints sizes,
bits per weight, zero fraction and timings. Nothing is downloaded.`,
		Example: `  ternkit demo
  ternkit demo --dir /tmp/scout --codec bits2`,
		Args: exactArgs(0),
		RunE: func(cmd *cobra.Command, _ []string) error {
			opts, err := rf.options()
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
			out, errOut := cmd.OutOrStdout(), cmd.ErrOrStderr()
			src := filepath.Join(dir, demoModel+".safetensors")
			art := filepath.Join(dir, demoModel+".tkart")

			start := time.Now()
			if err := writeDemoCheckpoint(src); err != nil {
				return err
			}
			fmt.Fprintf(out, "generated %s (%s, Fernmoss Seed Vault scanner assistant, fictional) in %s\n",
				src, demoModel, time.Since(start).Round(time.Millisecond))

			start = time.Now()
			m, err := packFile(src, art, opts, errOut)
			if err != nil {
				return err
			}
			if err := printPackResult(out, errOut, art, m, time.Since(start), false); err != nil {
				return err
			}

			start = time.Now()
			s, err := convert.Open(src)
			if err != nil {
				return err
			}
			defer s.Close()
			rep, err := verify.Run(art, verify.Options{Source: s})
			if err != nil {
				return err
			}
			fmt.Fprintf(out, "verify --against: %d checks in %s\n", len(rep.Checks), time.Since(start).Round(time.Millisecond))
			if err := printReport(out, rep, false); err != nil {
				return err
			}
			if !rep.OK() {
				return errVerifyFailed
			}
			fmt.Fprintf(out, "next: ternkit inspect %s\n", art)
			return nil
		},
	}
	rf.register(cmd)
	cmd.Flags().StringVar(&dir, "dir", "", "directory for the demo files (default: a new temporary directory)")
	return cmd
}

// writeDemoCheckpoint writes the scenario's checkpoint to path.
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
	add := func(name string, shape []int64, v []float32) {
		tensors = append(tensors, convert.WriteTensor{Name: name, DType: "BF16", Shape: shape, Data: bf16Bytes(v)})
	}
	add("embed.tokens.weight", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 1))
	for i := 0; i < demoLayers; i++ {
		p := fmt.Sprintf("blocks.%d.", i)
		add(p+"attn_norm.weight", []int64{demoWidth}, norm(demoWidth))
		for _, proj := range []string{"q", "k", "v", "o"} {
			add(p+"attn."+proj+".weight", []int64{demoWidth, demoWidth}, gauss(demoWidth*demoWidth, 0.02))
		}
		add(p+"mlp_norm.weight", []int64{demoWidth}, norm(demoWidth))
		add(p+"mlp.gate.weight", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		add(p+"mlp.up.weight", []int64{demoFFN, demoWidth}, gauss(demoFFN*demoWidth, 0.02))
		add(p+"mlp.down.weight", []int64{demoWidth, demoFFN}, gauss(demoFFN*demoWidth, 0.02))
	}
	add("final_norm.weight", []int64{demoWidth}, norm(demoWidth))
	add("lm_head.weight", []int64{demoVocab, demoWidth}, gauss(demoVocab*demoWidth, 0.02))
	meta := map[string]string{
		"model":     demoModel,
		"scenario":  "Fernmoss Seed Vault handheld scanner assistant (fictional demo data)",
		"generator": "ternkit demo " + version,
	}
	return convert.WriteFile(path, tensors, meta)
}

func bf16Bytes(v []float32) []byte {
	b := make([]byte, 2*len(v))
	for i, f := range v {
		binary.LittleEndian.PutUint16(b[2*i:], convert.Float32ToBF16(f))
	}
	return b
}
