package main

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/sign"
)

func newKeygenCmd() *cobra.Command {
	var name string
	cmd := &cobra.Command{
		Use:   "keygen -o NAME",
		Short: "Make an ed25519 key pair for signing artifacts",
		Long: `keygen writes a new private key to NAME.key (mode 0600) and its public key to
NAME.pub, in the text form of sign/FORMAT.md. It never replaces an existing
file. Keep NAME.key secret; hand NAME.pub to whoever checks your releases.

sign and verify also take ed25519 keys made by openssl (PKCS#8 and
SubjectPublicKeyInfo PEM) and by ssh-keygen -t ed25519 (see README,
"Signing").`,
		Example: `  ternkit keygen -o fernmoss-release
  ternkit sign model.tkart --key fernmoss-release.key
  ternkit verify model.tkart --key fernmoss-release.pub`,
		Args: exactArgs(0),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if name == "" {
				return usagef("keygen needs -o NAME (writes NAME%s and NAME%s)", sign.PrivateKeyExt, sign.PublicKeyExt)
			}
			name = strings.TrimSuffix(strings.TrimSuffix(name, sign.PrivateKeyExt), sign.PublicKeyExt)
			k, err := sign.GenerateKey(nil)
			if err != nil {
				return err
			}
			keyPath, pubPath, err := sign.WriteKeyPair(name, k)
			if errors.Is(err, os.ErrExist) {
				return usagef("%v; keygen never replaces a key file: choose another NAME or move the old files away", err)
			}
			if err != nil {
				return err
			}
			out := textOut(cmd)
			fmt.Fprintf(out, "wrote %s (private key, mode 0600: keep it secret)\n", keyPath)
			fmt.Fprintf(out, "wrote %s (public key, key-id %s)\n", pubPath, k.Public().ID())
			return nil
		},
	}
	cmd.Flags().StringVarP(&name, "output", "o", "", "base name of the key files: NAME"+sign.PrivateKeyExt+" and NAME"+sign.PublicKeyExt)
	return cmd
}
