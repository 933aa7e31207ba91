package main

import (
	"fmt"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/sign"
	"ternkit/verify"
)

func newSignCmd() *cobra.Command {
	var keyPath, out, format string
	var printMessage bool
	cmd := &cobra.Command{
		Use:   "sign ARTIFACT --key KEY [--format ternkit|ssh] [-o ARTIFACT.sig]",
		Short: "Sign an artifact's manifest hash with a private key",
		Long: `sign verifies ARTIFACT (structure, manifest hash, every section), then signs
its manifest hash with the ed25519 private key in KEY and writes the
signature to ARTIFACT.sig (or -o) atomically. It refuses an artifact that
fails verification (exit 1), a private key file that group or others may
read, and a passphrase-protected key (it never prompts).

KEY may be a ternkit key (ternkit keygen), a PKCS#8 PEM key (openssl genpkey
-algorithm ed25519) or an unencrypted OpenSSH key (ssh-keygen -t ed25519).
--format ssh writes an armored SSH signature in the namespace
` + sign.Namespace + `, which ssh-keygen -Y verify checks against the
message --print-message writes (see README, "Signing").

A signature says who released these exact bytes; it says nothing about the
model's quality.`,
		Example: `  ternkit sign fernmoss-scout-mini.tkart --key fernmoss-release.key
  ternkit sign fernmoss-scout-mini.tkart --key ~/.ssh/id_ed25519 --format ssh
  ternkit sign fernmoss-scout-mini.tkart --print-message > fernmoss-scout-mini.msg
  ternkit verify fernmoss-scout-mini.tkart --key fernmoss-release.pub`,
		Args:              exactArgs(1),
		ValidArgsFunction: artifactCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			if format != sign.FormText && format != sign.FormSSH {
				return usagef("--format %q: want %s or %s", format, sign.FormText, sign.FormSSH)
			}
			art := args[0]
			switch {
			case printMessage && (keyPath != "" || out != ""):
				return usagef("--print-message writes the message to stdout and signs nothing: drop --key and -o, redirect stdout instead")
			case printMessage && isTerminal(cmd.OutOrStdout()):
				return usagef("--print-message writes 52 binary bytes: redirect stdout to a file (ternkit sign %s --print-message > MESSAGE)", art)
			case keyPath == "" && !printMessage:
				return usagef("sign needs --key KEY (make one with: ternkit keygen -o NAME), or --print-message")
			}
			if out == "" {
				out = sign.SignaturePath(art)
			}
			if sameFile(out, art) || sameFile(out, keyPath) {
				return usagef("-o %s is an input of this command; write the signature elsewhere", out)
			}
			if err := checkOutput(out, art, keyPath); err != nil {
				return err
			}
			var k *sign.PrivateKey
			if !printMessage {
				var err error
				if k, err = sign.ReadPrivateKeyFile(keyPath); err != nil {
					return err
				}
			}
			// one open of the artifact: the hash signed is the one of the
			// manifest whose sections were just verified
			rep, err := verify.Run(art, verify.Options{})
			if err != nil {
				return err
			}
			if !rep.OK() {
				if err := notArtifactOf(rep, art); err != nil {
					return err
				}
				// failures still show under -q; with --print-message stdout
				// is the message file: say it on stderr
				out := cmd.OutOrStdout()
				if quiet(cmd) || printMessage {
					out = cmd.ErrOrStderr()
				}
				if err := printReport(out, rep, false, newWarnings(cmd)); err != nil {
					return err
				}
				fmt.Fprintf(out, "sign: refusing to sign %s: it fails verification\n", art)
				return errVerifyFailed
			}
			hash := rep.ManifestHash()
			if printMessage {
				_, err := cmd.OutOrStdout().Write(sign.Message(hash))
				return err
			}
			s := k.Sign(hash)
			if format == sign.FormSSH {
				s = k.SignSSH(hash)
			}
			if err := sign.WriteSignatureFile(out, s); err != nil {
				return err
			}
			fmt.Fprintf(textOut(cmd), "signed %s (manifest BLAKE3 %x) with key %s: wrote %s (%s form)\n",
				art, hash, k.Public().ID(), out, s.Form())
			return nil
		},
	}
	cmd.Flags().StringVar(&keyPath, "key", "", "private key file: ternkit (keygen), PKCS#8 PEM or OpenSSH ed25519")
	cmd.Flags().StringVarP(&out, "output", "o", "", "signature file to write (default ARTIFACT"+sign.SignatureExt+")")
	cmd.Flags().StringVar(&format, "format", sign.FormText, "signature form: "+sign.FormText+" (text, sign/FORMAT.md) or "+sign.FormSSH+" (armored SSH signature, namespace "+sign.Namespace+")")
	cmd.Flags().BoolVar(&printMessage, "print-message", false, "verify ARTIFACT, then write the 52-byte message a signature covers to stdout (to sign or check with ssh-keygen -Y)")
	_ = cmd.RegisterFlagCompletionFunc("format", fixedCompletions(sign.FormText, sign.FormSSH))
	_ = cmd.MarkFlagFilename("key")
	return cmd
}

// registerKeyFlag adds verify's --key and --sig flags.
func registerKeyFlag(cmd *cobra.Command) {
	cmd.Flags().String("key", "", "public key file (ternkit .pub, SubjectPublicKeyInfo PEM or ssh-ed25519 line): also require a valid signature over the manifest hash")
	cmd.Flags().String("sig", "", "signature file to check with --key (default ARTIFACT"+sign.SignatureExt+"; ternkit or SSH form)")
	_ = cmd.MarkFlagFilename("key")
	_ = cmd.MarkFlagFilename("sig", strings.TrimPrefix(sign.SignatureExt, "."))
}

// signatureFlags reads the public key --key names and the signature path
// (--sig, or ARTIFACT.sig); nil without --key.
func signatureFlags(cmd *cobra.Command, artifact string) (*verify.Signature, error) {
	path, _ := cmd.Flags().GetString("key")
	sigPath, _ := cmd.Flags().GetString("sig")
	if path == "" {
		if sigPath != "" {
			return nil, usagef("--sig %s needs --key: the public key to check it with", sigPath)
		}
		return nil, nil
	}
	k, err := sign.ReadPublicKeyFile(path)
	if err != nil {
		return nil, err
	}
	if sigPath == "" {
		sigPath = sign.SignaturePath(artifact)
	}
	return &verify.Signature{Key: k, Path: sigPath}, nil
}

// sameFile reports whether a and b name the same existing file (symlinks
// followed).
func sameFile(a, b string) bool {
	sa, errA := os.Stat(a)
	sb, errB := os.Stat(b)
	return errA == nil && errB == nil && os.SameFile(sa, sb)
}
