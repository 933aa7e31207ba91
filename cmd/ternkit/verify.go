package main

import (
	"encoding/json"
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"ternkit/verify"
)

func newVerifyCmd() *cobra.Command {
	var (
		against string
		asJSON  bool
	)
	cmd := &cobra.Command{
		Use:   "verify ARTIFACT [--against SRC]",
		Short: "Check an artifact's hashes and payloads, and optionally its source",
		Long: `verify checks the artifact's structure, the manifest hash, every section
hash, the zero padding, and decodes every ternary tensor against its trit
counts. With --against SRC it also re-reads the source checkpoint,
re-quantizes it with the recipe the manifest records, and requires the same
trits and scales, and the same bytes for kept tensors.

Exit status: 0 every check passed, 1 a check failed, 2 usage or unreadable input.
A passing verify proves bytes and bounds, not task quality.`,
		Example: `  ternkit verify model.tkart
  ternkit verify model.tkart --against model.safetensors --json`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var opts verify.Options
			if against != "" {
				src, err := openSource(against, cmd.ErrOrStderr())
				if err != nil {
					return err
				}
				defer src.Close()
				opts.Source = src
			}
			rep, err := verify.Run(args[0], opts)
			if err != nil {
				return err
			}
			if err := printReport(cmd.OutOrStdout(), rep, asJSON); err != nil {
				return err
			}
			if !rep.OK() {
				return errVerifyFailed
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&against, "against", "", "source checkpoint to re-quantize and compare (file, sharded set index, or directory)")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print every check as JSON")
	return cmd
}

func printReport(w io.Writer, rep *verify.Report, asJSON bool) error {
	if asJSON {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(struct {
			*verify.Report
			OK bool `json:"ok"`
		}{rep, rep.OK()})
	}
	for _, c := range rep.Failures() {
		if c.Tensor != "" {
			fmt.Fprintf(w, "FAIL %s %q: %s\n", c.Name, c.Tensor, c.Detail)
		} else {
			fmt.Fprintf(w, "FAIL %s: %s\n", c.Name, c.Detail)
		}
	}
	what := rep.Artifact
	if rep.Source != "" {
		what += " against " + rep.Source
	}
	if rep.OK() {
		fmt.Fprintf(w, "verify: ok: %d checks passed: %s\n", rep.Passed, what)
	} else {
		fmt.Fprintf(w, "verify: FAILED: %d of %d checks failed: %s\n", rep.Failed, rep.Failed+rep.Passed, what)
	}
	return nil
}
