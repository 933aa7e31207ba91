package main

import (
	"fmt"
	"os"
	"slices"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/pack"
)

func newUnpackCmd() *cobra.Command {
	var out, dtype, shardSize string
	cmd := &cobra.Command{
		Use:   "unpack ARTIFACT -o OUT.safetensors|DIR [--dtype source|f32|f16|bf16] [--shard-size SIZE]",
		Short: "Write an artifact back out as a float safetensors checkpoint",
		Long: `unpack writes a safetensors checkpoint with the artifact's tensor names,
shapes and order, so that an evaluation harness can load the model as it
will ship: ternary tensors become scale × trit and kept float tensors are
written in their source dtype (F32 for a source dtype other than F32, F16
or BF16), or all in --dtype; a kept tensor whose stored dtype is the one
written keeps its bytes; other kept tensors keep their bytes and dtype. The source metadata is kept,
and "` + pack.UnpackedFromKey + `" records the artifact's manifest BLAKE3.
Section hashes are checked while reading; a corrupt artifact fails with
exit 1 and nothing is written. The file is written atomically.

With -o DIR (any name not ending in .safetensors) unpack writes a complete
checkpoint directory: the weights as ` + pack.UnpackedWeights + `, or, with
--shard-size, as shards of at most SIZE tensor bytes and their index
` + pack.UnpackedIndex + `, plus every companion file (config, tokenizer,
licence, ...) byte for byte. DIR must not exist or be empty; it appears
complete or not at all.`,
		Example: `  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors
  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors --dtype bf16
  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval/ --shard-size 2MiB`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dt := strings.ToUpper(dtype)
			if dtype == "source" {
				dt = pack.SourceDType
			} else if !slices.Contains(pack.UnpackDTypes, dt) {
				return usagef("--dtype %q (valid: source, f32, f16, bf16)%s", dtype, didYouMean(dtype, []string{"source", "f32", "f16", "bf16"}))
			}
			if out == "" {
				return usagef("unpack needs -o OUT.safetensors or -o DIR (the checkpoint to write)")
			}
			toDir := !strings.HasSuffix(out, ".safetensors")
			shard, err := parseByteSize(shardSize)
			if err != nil {
				return usagef("--shard-size: %v", err)
			}
			if shard > 0 && !toDir {
				return usagef("--shard-size writes a directory: give -o DIR, not %q", out)
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() && !toDir {
				return usagef("-o %q is a directory; give the checkpoint's file name", out)
			}
			if st, err := os.Stat(out); err != nil || !st.IsDir() {
				// a file, in either mode, must not be the artifact read
				if err := checkOutput(out, args[0]); err != nil {
					return err
				}
			}
			a, err := pack.Open(args[0])
			if err != nil {
				return artifactError(err, args[0])
			}
			defer a.Close()
			if toDir {
				err = pack.UnpackDir(a, out, dt, shard)
			} else {
				if err := checkNotRecordedSource(out, a.Manifest()); err != nil {
					return err
				}
				err = pack.Unpack(a, out, dt)
			}
			if err != nil {
				return asCorrupt(err)
			}
			if !toDir {
				noteCompanionsLeftOut(cmd.ErrOrStderr(), a)
			}
			m := a.Manifest()
			as := dt
			if dt == pack.SourceDType {
				as = "source dtypes"
			}
			fmt.Fprintf(textOut(cmd), "unpacked %s: %d tensors (%d ternary as scale × trit) as %s -> %s\n",
				args[0], m.Totals.Tensors, m.Totals.TernaryTensors, as, out)
			if m.Totals.TernaryTensors > 0 {
				printCaution(cmd)
			}
			return nil
		},
	}
	cmd.Flags().StringVarP(&out, "output", "o", "", "safetensors `FILE` to write, or checkpoint `DIR` (weights and companion files)")
	cmd.Flags().StringVar(&shardSize, "shard-size", "", "with -o DIR: split the weights into shards of at most `SIZE` bytes (e.g. 500MB, 2GiB) with an index")
	cmd.Flags().StringVar(&dtype, "dtype", "source", "float dtype of the written tensors: source (each tensor's source dtype), f32, f16 or bf16")
	_ = cmd.RegisterFlagCompletionFunc("dtype", fixedCompletions("source", "f32", "f16", "bf16"))
	return cmd
}
