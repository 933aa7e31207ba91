// Package sign makes and checks ed25519 signatures over a ternkit
// artifact's manifest hash, with keys and signatures in the text files
// specified in sign/FORMAT.md.
//
// A valid signature says that the holder of the private key signed this
// exact manifest, and so, through the hashes the manifest records, these
// exact tensor bytes. It says nothing about the model's quality.
package sign

import (
	"crypto/ed25519"
	"encoding/hex"
	"errors"
	"fmt"
	"io"

	"github.com/zeebo/blake3"
)

// Sentinel errors for outcomes callers branch on.
var (
	// ErrFormat reports a key or signature file that breaks sign/FORMAT.md;
	// typically it is truncated, edited or not such a file at all.
	ErrFormat = errors.New("malformed key or signature file")
	// ErrWrongKey reports a signature made with another key.
	ErrWrongKey = errors.New("signature is from another key")
	// ErrManifestChanged reports a signature over another manifest: the
	// artifact changed since it was signed.
	ErrManifestChanged = errors.New("manifest changed since signing")
	// ErrBadSignature reports signature bytes that do not verify.
	ErrBadSignature = errors.New("invalid signature")
	// ErrKeyPermissions reports a private key file that group or others
	// may access.
	ErrKeyPermissions = errors.New("private key file permissions too open")
	// ErrWeakKey reports an ed25519 public key that is not the canonical
	// encoding of a curve point, or a point of small order.
	ErrWeakKey = errors.New("unsafe ed25519 public key")
	// ErrEncryptedKey reports a passphrase-protected private key; ternkit
	// never prompts for a passphrase.
	ErrEncryptedKey = errors.New("private key is encrypted")
)

// PublicKey checks signatures.
type PublicKey struct{ key ed25519.PublicKey }

// PrivateKey makes signatures.
type PrivateKey struct{ key ed25519.PrivateKey }

// Signature is a signature over one manifest hash, in ternkit's text form
// (Sign) or the SSH signature form (SignSSH).
type Signature struct {
	KeyID        string   // ID of the signing key
	ManifestHash [32]byte // BLAKE3 of the signed manifest (text form only; the SSH form does not record it)
	Ed25519      [ed25519.SignatureSize]byte

	ssh *sshSig // set for the SSH form
}

// GenerateKey makes a new key pair from rand (crypto/rand.Reader when nil).
func GenerateKey(rand io.Reader) (*PrivateKey, error) {
	_, k, err := ed25519.GenerateKey(rand)
	if err != nil {
		return nil, fmt.Errorf("generate key: %w", err)
	}
	return &PrivateKey{key: k}, nil
}

// Public is the key that checks k's signatures.
func (k *PrivateKey) Public() *PublicKey {
	return &PublicKey{key: k.key.Public().(ed25519.PublicKey)}
}

// ID names the key: the first 8 bytes of the BLAKE3 of the 32 public key
// bytes, in lowercase hex.
func (k *PublicKey) ID() string {
	sum := blake3.Sum256(k.key)
	return hex.EncodeToString(sum[:8])
}

// messagePrefix separates these signatures from any other use of the key.
const messagePrefix = "ternkit signature 1\x00"

// message is what is signed: the prefix, then the 32 hash bytes.
func message(manifestHash [32]byte) []byte {
	return append([]byte(messagePrefix), manifestHash[:]...)
}

// Sign signs a manifest hash.
func (k *PrivateKey) Sign(manifestHash [32]byte) *Signature {
	s := &Signature{KeyID: k.Public().ID(), ManifestHash: manifestHash}
	copy(s.Ed25519[:], ed25519.Sign(k.key, message(manifestHash)))
	return s
}

// Verify checks that s is k's signature over manifestHash. It returns an
// error wrapping ErrWrongKey, ErrManifestChanged or ErrBadSignature.
func (k *PublicKey) Verify(s *Signature, manifestHash [32]byte) error {
	if s.ssh != nil {
		return k.verifySSH(s, manifestHash)
	}
	if id := k.ID(); s.KeyID != id {
		return fmt.Errorf("%w: signed by key %s, checked with key %s", ErrWrongKey, s.KeyID, id)
	}
	if s.ManifestHash != manifestHash {
		return fmt.Errorf("%w: signature covers manifest BLAKE3 %x, the artifact's is %x", ErrManifestChanged, s.ManifestHash, manifestHash)
	}
	if !ed25519.Verify(k.key, message(manifestHash), s.Ed25519[:]) {
		return fmt.Errorf("%w: ed25519 check failed for key %s", ErrBadSignature, s.KeyID)
	}
	return nil
}
