package sign

import (
	"crypto/ed25519"
	"encoding/base64"
	"encoding/hex"
	"fmt"
	"strings"
)

// File headers and line labels (sign/FORMAT.md).
const (
	publicHeader    = "ternkit public key 1"
	privateHeader   = "ternkit private key 1"
	signatureHeader = "ternkit signature 1"

	labelKeyID    = "key-id"
	labelPublic   = "ed25519"
	labelSeed     = "ed25519-seed"
	labelManifest = "manifest-blake3"
	labelSig      = "ed25519"

	// maxFileLen bounds what a reader loads; every valid file is shorter.
	maxFileLen = 1024
)

var b64 = base64.StdEncoding.Strict()

// line is one "LABEL VALUE" line of a file.
type line struct{ label, value string }

// encodeText writes the header line, then each labelled line, each ended
// by a line feed.
func encodeText(header string, lines ...line) []byte {
	var b strings.Builder
	b.WriteString(header + "\n")
	for _, l := range lines {
		b.WriteString(l.label + " " + l.value + "\n")
	}
	return []byte(b.String())
}

// decodeText checks the header and the labels and returns the values.
// what names the file in errors.
func decodeText(what string, text []byte, header string, labels ...string) ([]string, error) {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s: %s", ErrFormat, what, fmt.Sprintf(format, args...))
	}
	if len(text) > maxFileLen {
		return nil, bad("%d bytes, longer than any valid file (%d)", len(text), maxFileLen)
	}
	s := string(text)
	if !strings.HasSuffix(s, "\n") {
		return nil, bad("does not end with a line feed")
	}
	lines := strings.Split(strings.TrimSuffix(s, "\n"), "\n")
	if lines[0] != header {
		return nil, bad("first line %q (want %q)", lines[0], header)
	}
	if len(lines) != 1+len(labels) {
		return nil, bad("%d lines (want %d)", len(lines), 1+len(labels))
	}
	values := make([]string, len(labels))
	for i, label := range labels {
		got, value, ok := strings.Cut(lines[1+i], " ")
		if !ok || got != label {
			return nil, bad("line %d is %q (want %q and a value)", 2+i, lines[1+i], label)
		}
		values[i] = value
	}
	return values, nil
}

// decodeBase64 decodes a canonical standard base64 value of n bytes.
func decodeBase64(what, label, v string, n int) ([]byte, error) {
	b, err := b64.DecodeString(v)
	if err != nil || len(b) != n || b64.EncodeToString(b) != v {
		return nil, fmt.Errorf("%w: %s: %s %q is not %d bytes in standard base64", ErrFormat, what, label, v, n)
	}
	return b, nil
}

// decodeHex decodes a lowercase hex value of n bytes.
func decodeHex(what, label, v string, n int) ([]byte, error) {
	b, err := hex.DecodeString(v)
	if err != nil || len(b) != n || hex.EncodeToString(b) != v {
		return nil, fmt.Errorf("%w: %s: %s %q is not %d bytes in lowercase hex", ErrFormat, what, label, v, n)
	}
	return b, nil
}

func (k *PublicKey) marshalText() []byte {
	return encodeText(publicHeader,
		line{labelKeyID, k.ID()},
		line{labelPublic, b64.EncodeToString(k.key)})
}

func parsePublicKey(what string, text []byte) (*PublicKey, error) {
	if strings.HasPrefix(string(text), privateHeader+"\n") {
		return nil, fmt.Errorf("%w: %s is a private key file; give the public key (.pub)", ErrFormat, what)
	}
	v, err := decodeText(what, text, publicHeader, labelKeyID, labelPublic)
	if err != nil {
		return nil, err
	}
	raw, err := decodeBase64(what, labelPublic, v[1], ed25519.PublicKeySize)
	if err != nil {
		return nil, err
	}
	k, err := newPublicKey(raw)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	if err := checkKeyID(what, v[0], k); err != nil {
		return nil, err
	}
	return k, nil
}

func (k *PrivateKey) marshalText() []byte {
	return encodeText(privateHeader,
		line{labelKeyID, k.Public().ID()},
		line{labelSeed, b64.EncodeToString(k.key.Seed())})
}

func parsePrivateKey(what string, text []byte) (*PrivateKey, error) {
	v, err := decodeText(what, text, privateHeader, labelKeyID, labelSeed)
	if err != nil {
		return nil, err
	}
	seed, err := decodeBase64(what, labelSeed, v[1], ed25519.SeedSize)
	if err != nil {
		return nil, err
	}
	k := &PrivateKey{key: ed25519.NewKeyFromSeed(seed)}
	if err := checkKeyID(what, v[0], k.Public()); err != nil {
		return nil, err
	}
	return k, nil
}

// checkKeyID requires the recorded key ID to match the key, which catches
// a damaged key file.
func checkKeyID(what, recorded string, k *PublicKey) error {
	if id := k.ID(); recorded != id {
		return fmt.Errorf("%w: %s: key-id %q does not match the key (its ID is %s)", ErrFormat, what, recorded, id)
	}
	return nil
}

func (s *Signature) marshalText() []byte {
	return encodeText(signatureHeader,
		line{labelKeyID, s.KeyID},
		line{labelManifest, hex.EncodeToString(s.ManifestHash[:])},
		line{labelSig, b64.EncodeToString(s.Ed25519[:])})
}

func parseSignature(what string, text []byte) (*Signature, error) {
	v, err := decodeText(what, text, signatureHeader, labelKeyID, labelManifest, labelSig)
	if err != nil {
		return nil, err
	}
	if _, err := decodeHex(what, labelKeyID, v[0], 8); err != nil {
		return nil, err
	}
	hash, err := decodeHex(what, labelManifest, v[1], 32)
	if err != nil {
		return nil, err
	}
	sig, err := decodeBase64(what, labelSig, v[2], ed25519.SignatureSize)
	if err != nil {
		return nil, err
	}
	s := &Signature{KeyID: v[0]}
	copy(s.ManifestHash[:], hash)
	copy(s.Ed25519[:], sig)
	return s, nil
}
