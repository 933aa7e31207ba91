package sign

import (
	"errors"
	"fmt"
	"io"
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

// ReadPrivateKeyFile reads a private key file. It refuses, with an error
// wrapping ErrKeyPermissions, a file that group or others may access.
func ReadPrivateKeyFile(path string) (*PrivateKey, error) {
	text, err := readSmallFile(path, true)
	if err != nil {
		return nil, err
	}
	return parsePrivateKey(path, text)
}

// ReadPublicKeyFile reads a public key file.
func ReadPublicKeyFile(path string) (*PublicKey, error) {
	text, err := readSmallFile(path, false)
	if err != nil {
		return nil, err
	}
	return parsePublicKey(path, text)
}

// WriteSignatureFile writes s to path atomically (mode 0644), replacing
// an older signature.
func WriteSignatureFile(path string, s *Signature) error {
	return atomicfile.WriteFile(path, s.marshalText(), PublicKeyMode)
}

// ReadSignatureFile reads a signature file.
func ReadSignatureFile(path string) (*Signature, error) {
	text, err := readSmallFile(path, false)
	if err != nil {
		return nil, err
	}
	return parseSignature(path, text)
}

// readSmallFile reads at most maxFileLen+1 bytes of a regular file, so that
// the parser can reject an oversized one without loading it.
func readSmallFile(path string, private bool) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, err
	}
	if !st.Mode().IsRegular() {
		return nil, fmt.Errorf("%w: %s is not a regular file", ErrFormat, path)
	}
	if perm := st.Mode().Perm(); private && perm&0o077 != 0 {
		return nil, fmt.Errorf("%w: %s has mode %04o; group and others must have no access (chmod 600 %s)", ErrKeyPermissions, path, perm, path)
	}
	text, err := io.ReadAll(io.LimitReader(f, maxFileLen+1))
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", path, err)
	}
	return text, nil
}
