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
	var out, dtype string
	cmd := &cobra.Command{
		Use:   "unpack ARTIFACT -o OUT.safetensors [--dtype source|f32|f16|bf16]",
		Short: "Write an artifact back out as a float safetensors checkpoint",
		Long: `unpack writes a safetensors checkpoint with the artifact's tensor names,
shapes and order, so that an evaluation harness can load the model as it
will ship: ternary tensors become scale × trit and kept float tensors are
written in their source dtype (F32 for a source dtype other than F32, F16
or BF16), or all in --dtype; a kept tensor whose stored dtype is the one
written keeps its bytes; other kept tensors keep their bytes and dtype. The source metadata is kept,
and "` + pack.UnpackedFromKey + `" records the artifact's manifest BLAKE3.
Section hashes are checked while reading; a corrupt artifact fails with
exit 1 and nothing is written. The file is written atomically.`,
		Example: `  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors
  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors --dtype bf16`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dt := strings.ToUpper(dtype)
			if dtype == "source" {
				dt = pack.SourceDType
			} else if !slices.Contains(pack.UnpackDTypes, dt) {
				return usagef("--dtype %q (valid: source, f32, f16, bf16)%s", dtype, didYouMean(dtype, []string{"source", "f32", "f16", "bf16"}))
			}
			if out == "" {
				return usagef("unpack needs -o OUT.safetensors (the checkpoint to write)")
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() {
				return usagef("-o %q is a directory; give the checkpoint's file name", out)
			}
			a, err := pack.Open(args[0])
			if err != nil {
				return artifactError(err, args[0])
			}
			defer a.Close()
			if err := pack.Unpack(a, out, dt); err != nil {
				return asCorrupt(err)
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
	cmd.Flags().StringVarP(&out, "output", "o", "", "safetensors file to write")
	cmd.Flags().StringVar(&dtype, "dtype", "source", "float dtype of the written tensors: source (each tensor's source dtype), f32, f16 or bf16")
	_ = cmd.RegisterFlagCompletionFunc("dtype", fixedCompletions("source", "f32", "f16", "bf16"))
	return cmd
}
