package main

import (
	"errors"
	"fmt"

	"github.com/spf13/cobra"

	"ternkit/pack"
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
model's quality.`,
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
			before, openErr := manifestHash(art)
			if openErr != nil && (errors.Is(openErr, pack.ErrNotArtifact) || notArtifact(art)) {
				return notArtifactError(openErr, art)
			}
			rep, err := verify.Run(art, verify.Options{})
			if err != nil {
				return err
			}
			if !rep.OK() {
				out := cmd.OutOrStdout()
				if quiet(cmd) {
					out = cmd.ErrOrStderr() // failures still show
				}
				if err := printReport(out, rep, false, newWarnings(cmd)); err != nil {
					return err
				}
				fmt.Fprintf(out, "sign: refusing to sign %s: it fails verification\n", art)
				return errVerifyFailed
			}
			if openErr != nil {
				return openErr
			}
			after, err := manifestHash(art)
			if err != nil {
				return err
			}
			if after != before {
				return fmt.Errorf("%s changed while it was verified (manifest BLAKE3 %x, then %x); not signed", art, before, after)
			}
			if err := sign.WriteSignatureFile(out, k.Sign(after)); err != nil {
				return err
			}
			fmt.Fprintf(textOut(cmd), "signed %s (manifest BLAKE3 %x) with key %s: wrote %s\n",
				art, after, k.Public().ID(), out)
			return nil
		},
	}
	cmd.Flags().StringVar(&keyPath, "key", "", "private key file (from ternkit keygen)")
	cmd.Flags().StringVarP(&out, "output", "o", "", "signature file to write (default ARTIFACT"+sign.SignatureExt+")")
	return cmd
}

// registerKeyFlag adds verify's --key flag.
func registerKeyFlag(cmd *cobra.Command) {
	cmd.Flags().String("key", "", "public key file (NAME"+sign.PublicKeyExt+"): also require ARTIFACT"+sign.SignatureExt+
		" to be its valid signature over the manifest hash")
}

// keyFlag reads the public key --key names, or returns nil without one.
func keyFlag(cmd *cobra.Command) (*sign.PublicKey, error) {
	path, err := cmd.Flags().GetString("key")
	if err != nil || path == "" {
		return nil, err
	}
	return sign.ReadPublicKeyFile(path)
}

// addSignatureCheck checks ARTIFACT.sig against key, when there is one,
// and says so when the signature is valid.
func addSignatureCheck(cmd *cobra.Command, rep *verify.Report, key *sign.PublicKey, artifact string) {
	if key == nil {
		return
	}
	sigPath := sign.SignaturePath(artifact)
	failed := rep.Failed
	verify.AddSignatureCheck(rep, artifact, key, sigPath)
	if asJSON, _ := cmd.Flags().GetBool("json"); rep.Failed == failed && !asJSON {
		fmt.Fprintf(textOut(cmd), "signature: valid, key-id %s (%s)\n", key.ID(), sigPath)
	}
}

// manifestHash is the manifest BLAKE3 of the artifact at path.
func manifestHash(path string) ([32]byte, error) {
	a, err := pack.Open(path)
	if err != nil {
		return [32]byte{}, err
	}
	defer a.Close()
	return a.ManifestHash(), nil
}
