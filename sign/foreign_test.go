package sign

import (
	"bytes"
	"crypto/ed25519"
	"crypto/x509"
	"encoding/binary"
	"encoding/pem"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/outsidetool"
)

func runTool(t *testing.T, stdin []byte, name string, args ...string) []byte {
	t.Helper()
	out, err := runToolErr(stdin, name, args...)
	require.NoError(t, err, "%s %s: %s", name, strings.Join(args, " "), out)
	return out
}

func runToolErr(stdin []byte, name string, args ...string) ([]byte, error) {
	cmd := exec.Command(name, args...)
	cmd.Stdin = bytes.NewReader(stdin)
	return cmd.CombinedOutput()
}

// Keys written by openssl (Debian's openssl package): genpkey's PKCS#8
// private key and pkey -pubout's SubjectPublicKeyInfo public key read as
// one pair; openssl's own ed25519 signature over ternkit's message equals
// ternkit's (ed25519 is deterministic, RFC 8032 section 5.1.6).
func TestOpenSSLKeys(t *testing.T) {
	openssl := outsidetool.Require(t, "openssl", "openssl")
	dir := t.TempDir()
	priv, pub := filepath.Join(dir, "vault.pem"), filepath.Join(dir, "vault.pub.pem")
	runTool(t, nil, openssl, "genpkey", "-algorithm", "ed25519", "-out", priv)
	runTool(t, nil, openssl, "pkey", "-in", priv, "-pubout", "-out", pub)
	require.NoError(t, os.Chmod(priv, 0o600))

	k, err := ReadPrivateKeyFile(priv)
	require.NoError(t, err)
	p, err := ReadPublicKeyFile(pub)
	require.NoError(t, err)
	require.Equal(t, k.Public().key, p.key)

	h := blake3.Sum256([]byte("fernmoss manifest"))
	s := k.Sign(h)
	require.NoError(t, p.Verify(s, h))
	msg := filepath.Join(dir, "msg")
	require.NoError(t, os.WriteFile(msg, Message(h), 0o644))
	theirs := runTool(t, nil, openssl, "pkeyutl", "-sign", "-rawin", "-inkey", priv, "-in", msg)
	require.Equal(t, s.Ed25519[:], theirs)

	// openssl checks ternkit's signature with the public key file.
	sigFile := filepath.Join(dir, "sig.bin")
	require.NoError(t, os.WriteFile(sigFile, s.Ed25519[:], 0o644))
	runTool(t, nil, openssl, "pkeyutl", "-verify", "-rawin", "-pubin", "-inkey", pub, "-in", msg, "-sigfile", sigFile)

	// The private key where a public one belongs, and the reverse.
	_, err = ReadPublicKeyFile(priv)
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "private key file")
	_, err = ReadPrivateKeyFile(pub)
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "is a public key")

	// Permissions are checked as for ternkit's own keys.
	require.NoError(t, os.Chmod(priv, 0o644))
	_, err = ReadPrivateKeyFile(priv)
	require.ErrorIs(t, err, ErrKeyPermissions)

	// A passphrase-protected key: a clear error naming the way out, no prompt.
	enc := filepath.Join(dir, "enc.pem")
	runTool(t, nil, openssl, "genpkey", "-algorithm", "ed25519", "-aes-256-cbc", "-pass", "pass:fernmoss", "-out", enc)
	require.NoError(t, os.Chmod(enc, 0o600))
	_, err = ReadPrivateKeyFile(enc)
	require.ErrorIs(t, err, ErrEncryptedKey)
	require.Contains(t, err.Error(), "openssl pkey -in "+enc)

	// Another algorithm is refused by name.
	ec := filepath.Join(dir, "ec.pem")
	runTool(t, nil, openssl, "genpkey", "-algorithm", "EC", "-pkeyopt", "ec_paramgen_curve:P-256", "-out", ec)
	require.NoError(t, os.Chmod(ec, 0o600))
	_, err = ReadPrivateKeyFile(ec)
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "not an ed25519 key")
}

// RFC 8032, section 7.1, TEST 1's key (from memory of the RFC's vectors)
// signs ternkit's prefixed message; openssl, given the same key as PKCS#8,
// makes the same signature over the same 52 bytes, and ternkit reads the
// key back from that PEM unchanged.
func TestRFC8032KeySignsPrefixedMessage(t *testing.T) {
	openssl := outsidetool.Require(t, "openssl", "openssl")
	dir := t.TempDir()
	seed := mustHex(t, "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	k := &PrivateKey{key: ed25519.NewKeyFromSeed(seed)}
	require.Equal(t, mustHex(t, "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"), []byte(k.Public().key))
	der, err := x509.MarshalPKCS8PrivateKey(k.key)
	require.NoError(t, err)
	keyPath := filepath.Join(dir, "rfc.pem")
	require.NoError(t, os.WriteFile(keyPath, pem.EncodeToMemory(&pem.Block{Type: "PRIVATE KEY", Bytes: der}), 0o600))
	back, err := ReadPrivateKeyFile(keyPath)
	require.NoError(t, err)
	require.Equal(t, k.key, back.key)

	var h [32]byte
	for i := range h {
		h[i] = byte(i)
	}
	msg := filepath.Join(dir, "msg")
	require.NoError(t, os.WriteFile(msg, Message(h), 0o644))
	require.Len(t, Message(h), 52)
	require.Equal(t, "ternkit signature 1\x00", string(Message(h)[:20]))
	theirs := runTool(t, nil, openssl, "pkeyutl", "-sign", "-rawin", "-inkey", keyPath, "-in", msg)
	require.Equal(t, theirs, k.Sign(h).Ed25519[:])
}

// Keys written by ssh-keygen (Debian's openssh-client): the unencrypted
// private key file and the public key line read as one pair.
func TestSSHKeygenKeys(t *testing.T) {
	sshKeygen := outsidetool.Require(t, "ssh-keygen", "openssh-client")
	dir := t.TempDir()
	priv := filepath.Join(dir, "vault")
	runTool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "", "-C", "fernmoss release", "-f", priv)
	k, err := ReadPrivateKeyFile(priv)
	require.NoError(t, err)
	p, err := ReadPublicKeyFile(priv + ".pub")
	require.NoError(t, err)
	require.Equal(t, k.Public().key, p.key)
	h := blake3.Sum256([]byte("fernmoss manifest"))
	require.NoError(t, p.Verify(k.Sign(h), h))

	_, err = ReadPrivateKeyFile(priv + ".pub")
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "is a public key")
	_, err = ReadPublicKeyFile(priv)
	require.Contains(t, err.Error(), "private key file")

	require.NoError(t, os.Chmod(priv, 0o640))
	_, err = ReadPrivateKeyFile(priv)
	require.ErrorIs(t, err, ErrKeyPermissions)

	enc := filepath.Join(dir, "enc")
	runTool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "fernmoss-passphrase", "-f", enc)
	_, err = ReadPrivateKeyFile(enc)
	require.ErrorIs(t, err, ErrEncryptedKey)
	require.Contains(t, err.Error(), "ssh-keygen -p -N ''")

	// the way out the error names works: the decrypted copy signs
	plain := filepath.Join(dir, "plain")
	require.NoError(t, os.WriteFile(plain, readAll(t, enc), 0o600))
	runTool(t, nil, sshKeygen, "-q", "-p", "-P", "fernmoss-passphrase", "-N", "", "-f", plain)
	_, err = ReadPrivateKeyFile(plain)
	require.NoError(t, err)
}

func readAll(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

// SSH signatures: ssh-keygen -Y sign over the message verifies with
// ternkit; ternkit's SignSSH verifies with ssh-keygen -Y verify; another
// namespace or a changed message fails both.
func TestSSHSignatureInterop(t *testing.T) {
	sshKeygen := outsidetool.Require(t, "ssh-keygen", "openssh-client")
	dir := t.TempDir()
	priv := filepath.Join(dir, "vault")
	runTool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "", "-C", "fernmoss release", "-f", priv)
	k, err := ReadPrivateKeyFile(priv)
	require.NoError(t, err)
	pub := k.Public()
	h := blake3.Sum256([]byte("fernmoss manifest"))
	other := blake3.Sum256([]byte("fernmoss manifest, edited"))

	// theirs, verified by ternkit
	for _, ns := range []string{Namespace, "file"} {
		out := runTool(t, Message(h), sshKeygen, "-Y", "sign", "-q", "-f", priv, "-n", ns)
		s, err := parseAnySignature("ssh.sig", out)
		require.NoError(t, err)
		require.Equal(t, FormSSH, s.Form())
		require.Equal(t, "sha512", s.ssh.hash)
		if ns == Namespace {
			require.NoError(t, pub.Verify(s, h))
			require.ErrorIs(t, pub.Verify(s, other), ErrBadSignature)
			// written back, the armor is byte for byte what ssh-keygen wrote
			require.Equal(t, string(out), string(s.marshalSSH()))
		} else {
			err := pub.Verify(s, h)
			require.ErrorIs(t, err, ErrBadSignature)
			require.Contains(t, err.Error(), "namespace")
		}
	}

	// the format's other hash algorithm (ssh-keygen -O hashalg=sha256)
	out := runTool(t, Message(h), sshKeygen, "-Y", "sign", "-q", "-f", priv, "-n", Namespace, "-O", "hashalg=sha256")
	s256, err := parseAnySignature("ssh256.sig", out)
	require.NoError(t, err)
	require.Equal(t, "sha256", s256.ssh.hash)
	require.NoError(t, pub.Verify(s256, h))
	require.ErrorIs(t, pub.Verify(s256, other), ErrBadSignature)

	// ours, verified by ssh-keygen
	signers := filepath.Join(dir, "allowed_signers")
	require.NoError(t, os.WriteFile(signers, append([]byte("release@fernmoss "), readAll(t, priv+".pub")...), 0o644))
	sigPath := filepath.Join(dir, "a.tkart.sig")
	require.NoError(t, WriteSignatureFile(sigPath, k.SignSSH(h)))
	verifyArgs := func(ns string) []string {
		return []string{"-Y", "verify", "-f", signers, "-I", "release@fernmoss", "-n", ns, "-s", sigPath}
	}
	runTool(t, Message(h), sshKeygen, verifyArgs(Namespace)...)
	_, err = runToolErr(Message(other), sshKeygen, verifyArgs(Namespace)...)
	require.Error(t, err, "a changed message")
	_, err = runToolErr(Message(h), sshKeygen, verifyArgs("file")...)
	require.Error(t, err, "another namespace")
	s, err := ReadSignatureFile(sigPath)
	require.NoError(t, err)
	require.NoError(t, pub.Verify(s, h))

	// another key's public half
	require.ErrorIs(t, testKey(t, 13).Public().Verify(s, h), ErrWrongKey)
}

// opensshPrivate writes an OpenSSH private key file body as PROTOCOL.key
// lays it out, with the given cipher and padding.
func opensshPrivate(k ed25519.PrivateKey, cipher string, check2 uint32, comment string) []byte {
	pub := k.Public().(ed25519.PublicKey)
	var privSec []byte
	privSec = binary.BigEndian.AppendUint32(privSec, 0x01020304)
	privSec = binary.BigEndian.AppendUint32(privSec, check2)
	privSec = sshString(privSec, []byte(sshEd25519))
	privSec = sshString(privSec, pub)
	privSec = sshString(privSec, k)
	privSec = sshString(privSec, []byte(comment))
	for i := byte(1); len(privSec)%8 != 0; i++ {
		privSec = append(privSec, i)
	}
	b := []byte(opensshMagic)
	b = sshString(b, []byte(cipher))
	kdf := "none"
	if cipher != "none" {
		kdf = "bcrypt"
	}
	b = sshString(b, []byte(kdf))
	b = sshString(b, nil)
	b = binary.BigEndian.AppendUint32(b, 1)
	b = sshString(b, sshPublicBlob(pub))
	b = sshString(b, privSec)
	return pem.EncodeToMemory(&pem.Block{Type: pemOpenSSH, Bytes: b})
}

func TestOpenSSHPrivateRejects(t *testing.T) {
	k := testKey(t, 14)
	good := opensshPrivate(k.key, "none", 0x01020304, "fernmoss")
	got, err := parseAnyPrivateKey("k", good)
	require.NoError(t, err)
	require.Equal(t, k.key, got.key)

	_, err = parseAnyPrivateKey("k", opensshPrivate(k.key, "aes256-ctr", 0x01020304, ""))
	require.ErrorIs(t, err, ErrEncryptedKey)
	_, err = parseAnyPrivateKey("k", opensshPrivate(k.key, "none", 0x01020305, ""))
	require.ErrorContains(t, err, "check values")
	mismatched := bytes.Clone(k.key)
	mismatched[40] ^= 1 // the public half inside the private key
	_, err = parseAnyPrivateKey("k", opensshPrivate(mismatched, "none", 0x01020304, ""))
	require.ErrorIs(t, err, ErrFormat)
	_, err = parseAnyPrivateKey("k", append(good, "trailing"...))
	require.ErrorIs(t, err, ErrFormat)
	_, err = parseAnyPublicKey("k.pub", []byte("ssh-rsa AAAAB3NzaC1yc2EAAAADAQABAAABAQ== x\n"))
	require.ErrorContains(t, err, `"ssh-ed25519"`)
	// a small-order key in an OpenSSH public line
	weak := sshPublicBlob(mustHex(t, "0100000000000000000000000000000000000000000000000000000000000000"))
	_, err = parseAnyPublicKey("k.pub", []byte("ssh-ed25519 "+b64.EncodeToString(weak)+" weak\n"))
	require.ErrorIs(t, err, ErrWeakKey)
}
