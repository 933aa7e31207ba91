package main

import (
	"encoding/hex"
	"fmt"

	"github.com/spf13/cobra"

	"ternkit/sign"
	"ternkit/verify"
)

func newSignCmd() *cobra.Command {
	var keyPath, out string
	cmd := &cobra.Command{
		Use:   "sign ARTIFACT --key NAME.key [-o ARTIFACT.sig]",
		Short: "Sign an artifact's manifest hash with a private key",
		Long: `sign verifies ARTIFACT (structure, manifest hash, every section), then signs
its manifest hash with the ed25519 key in NAME.key and writes the signature
to ARTIFACT.sig (or -o) atomically. It refuses an artifact that fails
verification (exit 1) and a private key file that group or others may read.

A signature says who released these exact bytes; it says nothing about the
model's quality. ` + caution + `.`,
		Example: `  ternkit sign fernmoss-scout-mini.tkart --key fernmoss-release.key
  ternkit verify fernmoss-scout-mini.tkart --key fernmoss-release.pub`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if keyPath == "" {
				return usagef("sign needs --key NAME%s (make one with: ternkit keygen -o NAME)", sign.PrivateKeyExt)
			}
			art := args[0]
			if out == "" {
				out = sign.SignaturePath(art)
			}
			k, err := sign.ReadPrivateKeyFile(keyPath)
			if err != nil {
				return err
			}
			rep, err := verify.Run(art, verify.Options{})
			if err != nil {
				return err
			}
			if !rep.OK() {
				if err := printReport(cmd.OutOrStdout(), rep, false); err != nil {
					return err
				}
				fmt.Fprintf(cmd.OutOrStdout(), "sign: refusing to sign %s: it fails verification\n", art)
				return errVerifyFailed
			}
			var hash [32]byte
			if _, err := hex.Decode(hash[:], []byte(rep.ManifestBLAKE3)); err != nil {
				return fmt.Errorf("manifest hash %q of %s: %w", rep.ManifestBLAKE3, art, err)
			}
			if err := sign.WriteSignatureFile(out, k.Sign(hash)); err != nil {
				return err
			}
			fmt.Fprintf(cmd.OutOrStdout(), "signed %s (manifest BLAKE3 %s) with key %s: wrote %s\n",
				art, rep.ManifestBLAKE3, k.Public().ID(), out)
			return nil
		},
	}
	cmd.Flags().StringVar(&keyPath, "key", "", "private key file (from ternkit keygen)")
	cmd.Flags().StringVarP(&out, "output", "o", "", "signature file to write (default ARTIFACT"+sign.SignatureExt+")")
	return cmd
}
