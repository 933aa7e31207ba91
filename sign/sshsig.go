package sign

import (
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"crypto/sha512"
	"encoding/binary"
	"encoding/pem"
	"fmt"
	"strings"
)

// The armored SSH signature format (OpenSSH's PROTOCOL.sshsig).
const (
	// Namespace is the SSH signature namespace of ternkit's artifact
	// signatures: ssh-keygen -Y sign/verify -n ternkit-artifact.
	Namespace = "ternkit-artifact"

	sshsigMagic   = "SSHSIG"
	sshsigVersion = 1
	sshsigPEM     = "SSH SIGNATURE"
	sshsigWrap    = 70 // line width of the armored base64, as ssh-keygen writes it
)

// Signature forms.
const (
	FormText = "ternkit" // ternkit's text form (sign/FORMAT.md)
	FormSSH  = "ssh"     // the armored SSH signature form
)

// sshSig is what an SSH signature adds to a Signature.
type sshSig struct {
	key       ed25519.PublicKey
	namespace string
	hash      string // "sha512" or "sha256"
}

// Message is the ed25519 message ternkit signs for a manifest hash: the 19
// ASCII bytes "ternkit signature 1", a zero byte, and the 32 hash bytes.
// It is the message an SSH signature is made over (ssh-keygen -Y sign
// reads it on standard input).
func Message(manifestHash [32]byte) []byte { return message(manifestHash) }

// SignSSH signs a manifest hash in the SSH signature form, namespace
// ternkit-artifact, hash sha512, over Message(manifestHash).
func (k *PrivateKey) SignSSH(manifestHash [32]byte) *Signature {
	pub := k.Public()
	s := &Signature{KeyID: pub.ID(), ssh: &sshSig{key: pub.key, namespace: Namespace, hash: "sha512"}}
	copy(s.Ed25519[:], ed25519.Sign(k.key, sshSignedData(Namespace, "sha512", message(manifestHash))))
	return s
}

// Form is FormText or FormSSH.
func (s *Signature) Form() string {
	if s.ssh != nil {
		return FormSSH
	}
	return FormText
}

// sshSignedData is what an SSH signature's key signs: the magic, string
// namespace, string reserved (empty), string hash algorithm, string
// H(message).
func sshSignedData(namespace, hash string, msg []byte) []byte {
	var h []byte
	switch hash {
	case "sha512":
		sum := sha512.Sum512(msg)
		h = sum[:]
	case "sha256":
		sum := sha256.Sum256(msg)
		h = sum[:]
	}
	b := []byte(sshsigMagic)
	b = sshString(b, []byte(namespace))
	b = sshString(b, nil)
	b = sshString(b, []byte(hash))
	return sshString(b, h)
}

// marshalSSH writes the armored signature: the magic, uint32 version 1,
// string public key blob, string namespace, string reserved, string hash
// algorithm, string signature blob (string "ssh-ed25519", string the 64
// signature bytes), in base64 lines of 70 between BEGIN and END lines.
func (s *Signature) marshalSSH() []byte {
	b := []byte(sshsigMagic)
	b = binary.BigEndian.AppendUint32(b, sshsigVersion)
	b = sshString(b, sshPublicBlob(s.ssh.key))
	b = sshString(b, []byte(s.ssh.namespace))
	b = sshString(b, nil)
	b = sshString(b, []byte(s.ssh.hash))
	b = sshString(b, sshString(sshString(nil, []byte(sshEd25519)), s.Ed25519[:]))
	enc := b64.EncodeToString(b)
	var out strings.Builder
	out.WriteString("-----BEGIN " + sshsigPEM + "-----\n")
	for len(enc) > 0 {
		n := min(sshsigWrap, len(enc))
		out.WriteString(enc[:n] + "\n")
		enc = enc[n:]
	}
	out.WriteString("-----END " + sshsigPEM + "-----\n")
	return []byte(out.String())
}

// parseSSHSignature reads an armored SSH signature. It accepts any
// namespace and the hash algorithms sha512 and sha256 (the two the format
// defines); Verify requires the namespace ternkit-artifact.
func parseSSHSignature(what string, text []byte) (*Signature, error) {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s: %s", ErrFormat, what, fmt.Sprintf(format, args...))
	}
	blk, rest := pem.Decode(text)
	if blk == nil || blk.Type != sshsigPEM {
		return nil, bad("not an armored %q block", sshsigPEM)
	}
	if len(bytes.TrimSpace(rest)) != 0 || len(blk.Headers) != 0 {
		return nil, bad("text after the signature or headers in it")
	}
	b := blk.Bytes
	if !bytes.HasPrefix(b, []byte(sshsigMagic)) {
		return nil, bad("no %q magic", sshsigMagic)
	}
	r := &sshReader{b: b[len(sshsigMagic):]}
	version := r.uint32()
	pubBlob, namespace, reserved, hash, sigBlob := r.string(), r.string(), r.string(), r.string(), r.string()
	if r.err != nil {
		return nil, bad("%v", r.err)
	}
	switch {
	case version != sshsigVersion:
		return nil, bad("version %d, want %d", version, sshsigVersion)
	case len(r.b) != 0:
		return nil, bad("%d bytes after the signature", len(r.b))
	case len(reserved) != 0:
		return nil, bad("reserved field of %d bytes, want none", len(reserved))
	case string(hash) != "sha512" && string(hash) != "sha256":
		return nil, bad("hash algorithm %q, want sha512 or sha256", hash)
	}
	pub, err := parseSSHPublicBlob(pubBlob)
	if err != nil {
		return nil, bad("public key: %v", err)
	}
	sr := &sshReader{b: sigBlob}
	typ, sig := sr.string(), sr.string()
	switch {
	case sr.err != nil:
		return nil, bad("signature: %v", sr.err)
	case string(typ) != sshEd25519:
		return nil, bad("signature type %q, want %q", typ, sshEd25519)
	case len(sig) != ed25519.SignatureSize || len(sr.b) != 0:
		return nil, bad("ed25519 signature of %d bytes and %d more, want %d", len(sig), len(sr.b), ed25519.SignatureSize)
	}
	k := &PublicKey{key: pub}
	s := &Signature{KeyID: k.ID(), ssh: &sshSig{key: pub, namespace: string(namespace), hash: string(hash)}}
	copy(s.Ed25519[:], sig)
	return s, nil
}

// parseAnySignature reads a signature in either form.
func parseAnySignature(what string, text []byte) (*Signature, error) {
	if bytes.HasPrefix(text, []byte("-----BEGIN "+sshsigPEM+"-----")) {
		return parseSSHSignature(what, text)
	}
	return parseSignature(what, text)
}

// verifySSH checks an SSH signature against k and the artifact's manifest
// hash.
func (k *PublicKey) verifySSH(s *Signature, manifestHash [32]byte) error {
	if !bytes.Equal(s.ssh.key, k.key) {
		return fmt.Errorf("%w: SSH signature by key %s, checked with key %s", ErrWrongKey, s.KeyID, k.ID())
	}
	if s.ssh.namespace != Namespace {
		return fmt.Errorf("%w: SSH signature namespace %q, want %q", ErrBadSignature, s.ssh.namespace, Namespace)
	}
	if !ed25519.Verify(k.key, sshSignedData(s.ssh.namespace, s.ssh.hash, message(manifestHash)), s.Ed25519[:]) {
		return fmt.Errorf("%w: ed25519 check of the SSH signature failed for key %s (the artifact changed since signing, or the signature is damaged)", ErrBadSignature, s.KeyID)
	}
	return nil
}
