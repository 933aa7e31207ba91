// Package filedigest hashes a whole file with BLAKE3 (ternkit's own hash)
// and SHA-256 (what release manifests and sha256sum use) in one read.
package filedigest

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"

	"github.com/zeebo/blake3"

	"ternkit/internal/inputfile"
)

// Digests are a file's hashes in lowercase hex.
type Digests struct {
	BLAKE3 string
	SHA256 string
}

// Hasher feeds every byte written to both hashes.
type Hasher struct {
	b3  *blake3.Hasher
	s2  io.Writer
	sum func([]byte) []byte
}

// New returns an empty Hasher.
func New() *Hasher {
	s := sha256.New()
	return &Hasher{b3: blake3.New(), s2: s, sum: s.Sum}
}

// Write hashes p with both; it never fails.
func (h *Hasher) Write(p []byte) (int, error) {
	h.b3.Write(p)
	h.s2.Write(p)
	return len(p), nil
}

// Digests returns the hashes of what was written.
func (h *Hasher) Digests() Digests {
	return Digests{BLAKE3: hex.EncodeToString(h.b3.Sum(nil)), SHA256: hex.EncodeToString(h.sum(nil))}
}

// File hashes the file at path.
func File(path string) (Digests, error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return Digests{}, err
	}
	defer f.Close()
	h := New()
	if _, err := io.Copy(h, f); err != nil {
		return Digests{}, fmt.Errorf("read %s: %w", path, err)
	}
	return h.Digests(), nil
}
