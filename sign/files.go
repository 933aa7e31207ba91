package sign

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"

	"ternkit/internal/atomicfile"
)

// File modes of written key files.
const (
	PrivateKeyMode = 0o600
	PublicKeyMode  = 0o644
)

// Key and signature file extensions.
const (
	PrivateKeyExt = ".key"
	PublicKeyExt  = ".pub"
	SignatureExt  = ".sig"
)

// SignaturePath is where the signature of the artifact at path lives.
func SignaturePath(artifact string) string { return artifact + SignatureExt }

// WriteKeyPair writes k to name+".key" (mode 0600) and its public key to
// name+".pub" (mode 0644), each atomically. It never replaces a file: if
// either exists, it fails with an error wrapping fs.ErrExist and leaves
// both alone.
func WriteKeyPair(name string, k *PrivateKey) (keyPath, pubPath string, err error) {
	keyPath, pubPath = name+PrivateKeyExt, name+PublicKeyExt
	for _, p := range []string{keyPath, pubPath} {
		if _, err := os.Lstat(p); err == nil {
			return "", "", fmt.Errorf("write %s: %w", p, os.ErrExist)
		}
	}
	if err := atomicfile.WriteNewFile(keyPath, k.marshalText(), PrivateKeyMode); err != nil {
		return "", "", existError(keyPath, err)
	}
	if err := atomicfile.WriteNewFile(pubPath, k.Public().marshalText(), PublicKeyMode); err != nil {
		os.Remove(keyPath)
		return "", "", existError(pubPath, err)
	}
	return keyPath, pubPath, nil
}

// existError names the destination, not the temporary file, when a file
// appeared at path while it was being written.
func existError(path string, err error) error {
	if errors.Is(err, os.ErrExist) {
		return fmt.Errorf("write %s: %w", path, os.ErrExist)
	}
	return err
}

// ReadPrivateKeyFile reads a private key file: ternkit's own, PKCS#8 PEM
// (as openssl genpkey writes it) or an unencrypted OpenSSH private key
// (as ssh-keygen -t ed25519 -N ” writes it). It refuses, with an error
// wrapping ErrKeyPermissions, a file that group or others may access, with
// one wrapping ErrEncryptedKey a passphrase-protected key, and says so
// when given a public key.
func ReadPrivateKeyFile(path string) (*PrivateKey, error) {
	text, st, err := readSmallFile(path)
	if err != nil {
		return nil, err
	}
	if classify(text) != kindPublic {
		if perm := st.Mode().Perm(); perm&0o077 != 0 {
			return nil, fmt.Errorf("%w: %s has mode %04o; group and others must have no access (chmod 600 %s)", ErrKeyPermissions, path, perm, path)
		}
	}
	return parseAnyPrivateKey(path, text)
}

// ReadPublicKeyFile reads a public key file: ternkit's own,
// SubjectPublicKeyInfo PEM (as openssl pkey -pubout writes it) or an
// OpenSSH "ssh-ed25519 AAAA... comment" line. Keys that are not a
// canonical point encoding, or of small order, are refused (ErrWeakKey).
func ReadPublicKeyFile(path string) (*PublicKey, error) {
	text, _, err := readSmallFile(path)
	if err != nil {
		return nil, err
	}
	return parseAnyPublicKey(path, text)
}

// WriteSignatureFile writes s in its form to path atomically (mode 0644),
// replacing an older signature.
func WriteSignatureFile(path string, s *Signature) error {
	text := s.marshalText()
	if s.ssh != nil {
		text = s.marshalSSH()
	}
	return atomicfile.WriteFile(path, text, PublicKeyMode)
}

// ReadSignatureFile reads a signature file, in ternkit's text form or the
// armored SSH signature form.
func ReadSignatureFile(path string) (*Signature, error) {
	text, _, err := readSmallFile(path)
	if err != nil {
		return nil, err
	}
	return parseAnySignature(path, text)
}

// maxReadLen bounds what a reader loads of a key or signature file; every
// accepted file is far shorter.
const maxReadLen = 64 << 10

// readSmallFile reads at most maxReadLen+1 bytes of a regular file, so
// that the parser can reject an oversized one without loading it.
func readSmallFile(path string) ([]byte, fs.FileInfo, error) {
	// a FIFO or device would block the open or the read: refuse it first
	if st, err := os.Stat(path); err != nil {
		return nil, nil, err
	} else if !st.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("%w: %s is not a regular file", ErrFormat, path)
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, nil, err
	}
	if !st.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("%w: %s is not a regular file", ErrFormat, path)
	}
	text, err := io.ReadAll(io.LimitReader(f, maxReadLen+1))
	if err != nil {
		return nil, nil, fmt.Errorf("read %s: %w", path, err)
	}
	if len(text) > maxReadLen {
		return nil, nil, fmt.Errorf("%w: %s is longer than any key or signature file (%d bytes)", ErrFormat, path, maxReadLen)
	}
	return text, st, nil
}
