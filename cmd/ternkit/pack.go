package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"time"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// recipeFlags are the ternarization options shared by pack and demo.
type recipeFlags struct {
	codec     string
	scaleRule string
	epsilon   float64
	tie       string
}

func (f *recipeFlags) register(cmd *cobra.Command) {
	d := convert.DefaultRecipe()
	cmd.Flags().StringVar(&f.codec, "codec", string(pack.Auto), "trit codec: auto (per tensor the smaller of base3 and entropy), base3 (5 trits/byte, 1.6 bits/weight), entropy (base3 in a zstd frame) or bits2 (4 trits/byte, fastest decode)")
	cmd.Flags().StringVar(&f.scaleRule, "scale-rule", string(d.ScaleRule), "reciprocal (w × 1/max(gamma, eps), training-code form) or quotient (w / (gamma + eps), paper form)")
	cmd.Flags().Float64Var(&f.epsilon, "epsilon", d.Epsilon, "epsilon of the scale rule")
	cmd.Flags().StringVar(&f.tie, "tie", string(d.Tie), "rounding of exact halves: half-even or half-away")
}

// options checks the flags before any I/O.
func (f *recipeFlags) options() (pack.Options, error) {
	codec, err := pack.ParseCodec(f.codec)
	if err != nil {
		return pack.Options{}, usageError{err}
	}
	r := convert.DefaultRecipe()
	r.ScaleRule, r.Epsilon, r.Tie = convert.ScaleRule(f.scaleRule), f.epsilon, convert.TieRule(f.tie)
	if err := r.Validate(); err != nil {
		return pack.Options{}, usageError{err}
	}
	return pack.Options{Codec: codec, Recipe: r, Tool: "ternkit " + version}, nil
}

func newPackCmd() *cobra.Command {
	var (
		rf     recipeFlags
		out    string
		asJSON bool
	)
	cmd := &cobra.Command{
		Use:   "pack SRC -o OUT",
		Short: "Ternarize a safetensors checkpoint into an artifact",
		Long: `pack reads SRC (a .safetensors file), ternarizes every 2-D float tensor
except embeddings and the output head (names containing "embed" or
"lm_head") with the absmean method, keeps the rest byte for byte, and writes
the artifact to OUT atomically: on any error nothing is written at OUT.

` + caution + `.`,
		Example: `  ternkit pack model.safetensors -o model.tkart
  ternkit pack model.safetensors -o model.tkart --codec bits2 --scale-rule quotient`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts, err := rf.options()
			if err != nil {
				return err
			}
			if out == "" {
				return usagef("pack needs -o OUT (the artifact to write)")
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() {
				return usagef("-o %q is a directory; give the artifact's file name", out)
			}
			start := time.Now()
			m, err := packFile(args[0], out, opts)
			if err != nil {
				return err
			}
			return printPackResult(cmd.OutOrStdout(), cmd.ErrOrStderr(), out, m, time.Since(start), asJSON)
		},
	}
	rf.register(cmd)
	cmd.Flags().StringVarP(&out, "output", "o", "", "artifact to write (conventionally *"+pack.Extension+")")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the result as JSON")
	return cmd
}

// packFile opens src and builds the artifact at out.
func packFile(src, out string, opts pack.Options) (*manifest.Manifest, error) {
	s, err := convert.Open(src)
	if err != nil {
		return nil, err
	}
	defer s.Close()
	return pack.Build(s, out, opts)
}

func printPackResult(stdout, stderr io.Writer, out string, m *manifest.Manifest, took time.Duration, asJSON bool) error {
	t := m.Totals
	if asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(struct {
			Artifact string          `json:"artifact"`
			Seconds  float64         `json:"seconds"`
			Totals   manifest.Totals `json:"totals"`
		}{out, took.Seconds(), t})
	}
	var size int64
	if st, err := os.Stat(out); err == nil {
		size = st.Size()
	}
	fmt.Fprintf(stdout, "packed %s: %d tensors (%d ternary, %d kept), %s -> %s (%.2fx smaller) in %s\n",
		out, t.Tensors, t.TernaryTensors, t.KeptTensors, humanBytes(t.SourceBytes), humanBytes(size),
		ratio(t.SourceBytes, size), took.Round(time.Millisecond))
	if t.TernaryTensors > 0 {
		fmt.Fprintf(stdout, "ternary: %d weights at %.3f bits/weight, %.1f%% zeros\n",
			t.TernaryParams, t.BitsPerTernaryWeight, 100*zeroFraction(m))
		fmt.Fprintln(stderr, caution)
	}
	return nil
}

// zeroFraction is the fraction of zero trits over all ternary tensors.
func zeroFraction(m *manifest.Manifest) float64 {
	var zero, all int64
	for _, e := range m.Tensors {
		if e.Trits != nil {
			zero += e.Trits.Zero
			all += e.Trits.Total()
		}
	}
	if all == 0 {
		return 0
	}
	return float64(zero) / float64(all)
}

func ratio(a, b int64) float64 {
	if b == 0 {
		return 0
	}
	return float64(a) / float64(b)
}

func humanBytes(n int64) string {
	const unit = 1024
	if n < unit {
		return fmt.Sprintf("%d B", n)
	}
	div, exp := int64(unit), 0
	for m := n / unit; m >= unit; m /= unit {
		div *= unit
		exp++
	}
	return fmt.Sprintf("%.1f %ciB", float64(n)/float64(div), "KMGTPE"[exp])
}
