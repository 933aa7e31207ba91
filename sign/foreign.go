package sign

import (
	"bytes"
	"crypto/ed25519"
	"crypto/x509"
	"encoding/binary"
	"encoding/pem"
	"fmt"
	"strings"
)

// Key files written by other tools, recognized by their first bytes.
const (
	pemPKCS8          = "PRIVATE KEY"           // RFC 5958 / PKCS#8, unencrypted
	pemPKCS8Encrypted = "ENCRYPTED PRIVATE KEY" // RFC 5958, passphrase-protected
	pemSPKI           = "PUBLIC KEY"            // RFC 5280 SubjectPublicKeyInfo
	pemOpenSSH        = "OPENSSH PRIVATE KEY"   // OpenSSH PROTOCOL.key
	sshEd25519        = "ssh-ed25519"           // RFC 8709 key type name
	opensshMagic      = "openssh-key-v1\x00"
)

// keyKind is what a key file holds.
type keyKind int

const (
	kindUnknown keyKind = iota
	kindPublic
	kindPrivate
)

// classify says whether text looks like a public or a private key file of
// any accepted form, so that the caller can tell a user who gave one for
// the other, and check a private key file's permissions.
func classify(text []byte) keyKind {
	s := string(text)
	switch {
	case strings.HasPrefix(s, publicHeader+"\n"), strings.HasPrefix(s, sshEd25519+" "),
		strings.HasPrefix(s, "-----BEGIN "+pemSPKI+"-----"):
		return kindPublic
	case strings.HasPrefix(s, privateHeader+"\n"), strings.HasPrefix(s, "-----BEGIN "+pemPKCS8+"-----"),
		strings.HasPrefix(s, "-----BEGIN "+pemPKCS8Encrypted+"-----"), strings.HasPrefix(s, "-----BEGIN "+pemOpenSSH+"-----"):
		return kindPrivate
	}
	return kindUnknown
}

// parseAnyPublicKey reads a public key in any accepted form: ternkit's
// text, SubjectPublicKeyInfo PEM, or an OpenSSH "ssh-ed25519 BASE64
// [comment]" line. A private key of any form is refused with a pointer to
// the public half.
func parseAnyPublicKey(what string, text []byte) (*PublicKey, error) {
	s := string(text)
	switch {
	case classify(text) == kindPrivate:
		return nil, fmt.Errorf("%w: %s is a private key file; give the public key (.pub)", ErrFormat, what)
	case strings.HasPrefix(s, "-----BEGIN "):
		der, err := pemBlock(what, text, pemSPKI)
		if err != nil {
			return nil, err
		}
		k, err := x509.ParsePKIXPublicKey(der)
		if err != nil {
			return nil, fmt.Errorf("%w: %s: %v", ErrFormat, what, err)
		}
		raw, ok := k.(ed25519.PublicKey)
		if !ok {
			return nil, fmt.Errorf("%w: %s holds a %T, not an ed25519 key", ErrFormat, what, k)
		}
		return wrapPublic(what, raw)
	case strings.HasPrefix(s, "ssh-"), strings.HasPrefix(s, "ecdsa-"):
		return parseSSHPublicLine(what, s)
	}
	return parsePublicKey(what, text)
}

// parseAnyPrivateKey reads a private key in any accepted form: ternkit's
// text, PKCS#8 PEM, or an unencrypted OpenSSH private key file.
func parseAnyPrivateKey(what string, text []byte) (*PrivateKey, error) {
	s := string(text)
	switch {
	case classify(text) == kindPublic:
		return nil, fmt.Errorf("%w: %s is a public key; signing needs the private key", ErrFormat, what)
	case strings.HasPrefix(s, "-----BEGIN "+pemPKCS8Encrypted+"-----"):
		return nil, fmt.Errorf("%w: %s is passphrase-protected and ternkit never prompts; write a decrypted copy with mode 0600 (umask 077; openssl pkey -in %s -out plain.pem) and sign with that", ErrEncryptedKey, what, what)
	case strings.HasPrefix(s, "-----BEGIN "+pemPKCS8+"-----"):
		der, err := pemBlock(what, text, pemPKCS8)
		if err != nil {
			return nil, err
		}
		k, err := x509.ParsePKCS8PrivateKey(der)
		if err != nil {
			return nil, fmt.Errorf("%w: %s: %v", ErrFormat, what, err)
		}
		raw, ok := k.(ed25519.PrivateKey)
		if !ok {
			return nil, fmt.Errorf("%w: %s holds a %T, not an ed25519 key", ErrFormat, what, k)
		}
		return wrapPrivate(what, raw.Seed(), raw.Public().(ed25519.PublicKey))
	case strings.HasPrefix(s, "-----BEGIN "+pemOpenSSH+"-----"):
		der, err := pemBlock(what, text, pemOpenSSH)
		if err != nil {
			return nil, err
		}
		return parseOpenSSHPrivate(what, der)
	}
	return parsePrivateKey(what, text)
}

// pemBlock decodes the one PEM block of the given type that text holds.
func pemBlock(what string, text []byte, typ string) ([]byte, error) {
	b, rest := pem.Decode(text)
	if b == nil || b.Type != typ {
		return nil, fmt.Errorf("%w: %s: not a PEM %q block", ErrFormat, what, typ)
	}
	if len(bytes.TrimSpace(rest)) != 0 {
		return nil, fmt.Errorf("%w: %s: %d bytes after the PEM block", ErrFormat, what, len(rest))
	}
	if len(b.Headers) != 0 {
		return nil, fmt.Errorf("%w: %s: PEM headers are not supported (an encrypted legacy key?)", ErrEncryptedKey, what)
	}
	return b.Bytes, nil
}

func wrapPublic(what string, raw []byte) (*PublicKey, error) {
	k, err := newPublicKey(raw)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	return k, nil
}

// wrapPrivate builds a key from its seed and requires the public key the
// file records, when it records one, to be the seed's.
func wrapPrivate(what string, seed, recordedPublic []byte) (*PrivateKey, error) {
	if len(seed) != ed25519.SeedSize {
		return nil, fmt.Errorf("%w: %s: ed25519 seed of %d bytes, want %d", ErrFormat, what, len(seed), ed25519.SeedSize)
	}
	k := &PrivateKey{key: ed25519.NewKeyFromSeed(seed)}
	if recordedPublic != nil && !bytes.Equal(recordedPublic, k.key.Public().(ed25519.PublicKey)) {
		return nil, fmt.Errorf("%w: %s: the recorded public key is not the private key's", ErrFormat, what)
	}
	if _, err := wrapPublic(what, k.key.Public().(ed25519.PublicKey)); err != nil {
		return nil, err
	}
	return k, nil
}

// sshReader reads the wire encoding of RFC 4251, section 5: uint32
// big-endian, and string as a uint32 length and that many bytes.
type sshReader struct {
	b   []byte
	err error
}

func (r *sshReader) uint32() uint32 {
	if r.err != nil {
		return 0
	}
	if len(r.b) < 4 {
		r.err = fmt.Errorf("truncated at a uint32")
		return 0
	}
	v := binary.BigEndian.Uint32(r.b)
	r.b = r.b[4:]
	return v
}

func (r *sshReader) string() []byte {
	n := r.uint32()
	if r.err != nil {
		return nil
	}
	if uint64(n) > uint64(len(r.b)) {
		r.err = fmt.Errorf("string of %d bytes with %d left", n, len(r.b))
		return nil
	}
	s := r.b[:n]
	r.b = r.b[n:]
	return s
}

// sshString appends s in the RFC 4251 string encoding.
func sshString(dst, s []byte) []byte {
	dst = binary.BigEndian.AppendUint32(dst, uint32(len(s)))
	return append(dst, s...)
}

// sshPublicBlob is the RFC 8709 public key blob: string "ssh-ed25519",
// string key.
func sshPublicBlob(k ed25519.PublicKey) []byte {
	return sshString(sshString(nil, []byte(sshEd25519)), k)
}

// parseSSHPublicBlob reads an RFC 8709 public key blob.
func parseSSHPublicBlob(blob []byte) (ed25519.PublicKey, error) {
	r := &sshReader{b: blob}
	typ, key := r.string(), r.string()
	switch {
	case r.err != nil:
		return nil, r.err
	case string(typ) != sshEd25519:
		return nil, fmt.Errorf("key type %q, want %q", typ, sshEd25519)
	case len(key) != ed25519.PublicKeySize:
		return nil, fmt.Errorf("ed25519 key of %d bytes, want %d", len(key), ed25519.PublicKeySize)
	case len(r.b) != 0:
		return nil, fmt.Errorf("%d bytes after the key", len(r.b))
	}
	return key, nil
}

// parseSSHPublicLine reads an OpenSSH public key line: "ssh-ed25519",
// a space, the base64 blob, and an optional comment.
func parseSSHPublicLine(what, s string) (*PublicKey, error) {
	line, rest, _ := strings.Cut(s, "\n")
	if strings.TrimSpace(rest) != "" {
		return nil, fmt.Errorf("%w: %s: more than one line (give one ssh-ed25519 key)", ErrFormat, what)
	}
	fields := strings.Fields(line)
	if len(fields) < 2 || fields[0] != sshEd25519 {
		return nil, fmt.Errorf("%w: %s: want an %q key line, got type %q", ErrFormat, what, sshEd25519, fields[0])
	}
	blob, err := b64.DecodeString(fields[1])
	if err != nil {
		return nil, fmt.Errorf("%w: %s: key is not base64: %v", ErrFormat, what, err)
	}
	raw, err := parseSSHPublicBlob(blob)
	if err != nil {
		return nil, fmt.Errorf("%w: %s: %v", ErrFormat, what, err)
	}
	return wrapPublic(what, raw)
}

// parseOpenSSHPrivate reads the body of an OpenSSH private key file as
// OpenSSH's PROTOCOL.key lays it out: the magic "openssh-key-v1\0",
// string ciphername, string kdfname, string kdfoptions, uint32 number of
// keys, string public key, string private section. The private section,
// unencrypted (cipher "none"), holds two equal uint32 check values, then
// per key: string type, string public key, string private key (seed and
// public key, 64 bytes), string comment; then padding 1, 2, 3, ... to the
// cipher's block size (8 for "none").
func parseOpenSSHPrivate(what string, body []byte) (*PrivateKey, error) {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s: %s", ErrFormat, what, fmt.Sprintf(format, args...))
	}
	if !bytes.HasPrefix(body, []byte(opensshMagic)) {
		return nil, bad("no %q magic", strings.TrimSuffix(opensshMagic, "\x00"))
	}
	r := &sshReader{b: body[len(opensshMagic):]}
	cipher, kdf, _ := r.string(), r.string(), r.string()
	n := r.uint32()
	pubBlob, priv := r.string(), r.string()
	if r.err != nil {
		return nil, bad("%v", r.err)
	}
	if string(cipher) != "none" || string(kdf) != "none" {
		return nil, fmt.Errorf("%w: %s is passphrase-protected (cipher %q) and ternkit never prompts; remove the passphrase on a copy (cp %s plain && ssh-keygen -p -N '' -f plain) and sign with that", ErrEncryptedKey, what, cipher, what)
	}
	if n != 1 {
		return nil, bad("%d keys, want 1", n)
	}
	if len(r.b) != 0 {
		return nil, bad("%d bytes after the private section", len(r.b))
	}
	pub, err := parseSSHPublicBlob(pubBlob)
	if err != nil {
		return nil, bad("public key: %v", err)
	}
	if len(priv)%8 != 0 {
		return nil, bad("private section of %d bytes, not a multiple of 8", len(priv))
	}
	p := &sshReader{b: priv}
	check1, check2 := p.uint32(), p.uint32()
	typ, pub2, secret, _ := p.string(), p.string(), p.string(), p.string()
	if p.err != nil {
		return nil, bad("private section: %v", p.err)
	}
	switch {
	case check1 != check2:
		return nil, bad("check values %08x and %08x differ (a wrong passphrase or a damaged file)", check1, check2)
	case string(typ) != sshEd25519:
		return nil, bad("key type %q, want %q", typ, sshEd25519)
	case !bytes.Equal(pub2, pub):
		return nil, bad("the private section's public key is not the file's")
	case len(secret) != ed25519.PrivateKeySize:
		return nil, bad("ed25519 private key of %d bytes, want %d", len(secret), ed25519.PrivateKeySize)
	case !bytes.Equal(secret[32:], pub):
		return nil, bad("the private key's public half is not the file's public key")
	}
	if len(p.b) >= 8 {
		return nil, bad("%d bytes of padding, want fewer than 8", len(p.b))
	}
	for i, c := range p.b {
		if int(c) != i+1 {
			return nil, bad("padding byte %d is %d, want %d", i, c, i+1)
		}
	}
	return wrapPrivate(what, secret[:32], pub)
}
