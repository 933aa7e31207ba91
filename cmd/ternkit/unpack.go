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
		Use:   "unpack ARTIFACT -o OUT.safetensors [--dtype f32|f16|bf16]",
		Short: "Write an artifact back out as a float safetensors checkpoint",
		Long: `unpack writes a safetensors checkpoint with the artifact's tensor names,
shapes and order, so that an evaluation harness can load the model as it
will ship: ternary tensors become scale × trit, kept float tensors are
converted to --dtype (byte for byte when their source dtype is --dtype),
other kept tensors keep their bytes and dtype. The source metadata is kept,
and "` + pack.UnpackedFromKey + `" records the artifact's manifest BLAKE3.
Section hashes are checked while reading; the file is written atomically.

` + caution + `.`,
		Example: `  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors
  ternkit unpack fernmoss-scout-mini.tkart -o scout-eval.safetensors --dtype bf16`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dt := strings.ToUpper(dtype)
			if !slices.Contains(pack.UnpackDTypes, dt) {
				return usagef("--dtype %q (valid: f32, f16, bf16)", dtype)
			}
			if out == "" {
				return usagef("unpack needs -o OUT.safetensors (the checkpoint to write)")
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() {
				return usagef("-o %q is a directory; give the checkpoint's file name", out)
			}
			a, err := pack.Open(args[0])
			if err != nil {
				return err
			}
			defer a.Close()
			if err := checkOutput(out, args[0]); err != nil {
				return err
			}
			if err := checkNotRecordedSource(out, a.Manifest()); err != nil {
				return err
			}
			if err := pack.Unpack(a, out, dt); err != nil {
				return err
			}
			m := a.Manifest()
			fmt.Fprintf(cmd.OutOrStdout(), "unpacked %s: %d tensors (%d ternary as scale × trit) as %s -> %s\n",
				args[0], m.Totals.Tensors, m.Totals.TernaryTensors, dt, out)
			return nil
		},
	}
	cmd.Flags().StringVarP(&out, "output", "o", "", "safetensors file to write")
	cmd.Flags().StringVar(&dtype, "dtype", "f32", "float dtype of the written tensors: f32, f16 or bf16")
	return cmd
}
