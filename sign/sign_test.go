package sign

import (
	"bytes"
	"crypto/ed25519"
	"encoding/hex"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

func mustHex(t *testing.T, s string) []byte {
	t.Helper()
	b, err := hex.DecodeString(s)
	require.NoError(t, err)
	return b
}

// RFC 8032, section 7.1, TEST 1 (from memory of the RFC's published
// vectors): the empty message under a fixed key. The text forms wrap the
// raw keys unchanged: the private key file's seed derives the RFC's public
// key and reproduces the RFC's signature, and the public key file checks it.
func TestRFC8032Vector1(t *testing.T) {
	secret := mustHex(t, "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	public := mustHex(t, "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")
	sig := mustHex(t, "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")

	sum := blake3.Sum256(public)
	pubID := hex.EncodeToString(sum[:8])
	privText := "ternkit private key 1\nkey-id " + pubID + "\ned25519-seed " + b64.EncodeToString(secret) + "\n"
	priv, err := parsePrivateKey("rfc.key", []byte(privText))
	require.NoError(t, err)
	require.Equal(t, public, []byte(priv.Public().key))
	require.Equal(t, sig, ed25519.Sign(priv.key, nil))
	require.Equal(t, privText, string(priv.marshalText()))

	pubText := "ternkit public key 1\nkey-id " + pubID + "\ned25519 " + b64.EncodeToString(public) + "\n"
	pub, err := parsePublicKey("rfc.pub", []byte(pubText))
	require.NoError(t, err)
	require.True(t, ed25519.Verify(pub.key, nil, sig))
	require.Equal(t, pubText, string(priv.Public().marshalText()))
}

func testKey(t *testing.T, seed byte) *PrivateKey {
	t.Helper()
	k, err := GenerateKey(bytes.NewReader(bytes.Repeat([]byte{seed}, 64)))
	require.NoError(t, err)
	return k
}

func TestSignVerify(t *testing.T) {
	k, other := testKey(t, 1), testKey(t, 2)
	manifest := []byte(`{"format":"ternkit-artifact","tool":"ternkit test"}`)
	h := blake3.Sum256(manifest)
	s := k.Sign(h)
	require.NoError(t, k.Public().Verify(s, h))

	require.ErrorIs(t, other.Public().Verify(s, h), ErrWrongKey)

	// Any changed byte of the manifest: its hash changes and the check fails.
	for i := range manifest {
		for _, mask := range []byte{0x01, 0x80} {
			m := bytes.Clone(manifest)
			m[i] ^= mask
			require.ErrorIs(t, k.Public().Verify(s, blake3.Sum256(m)), ErrManifestChanged, "byte %d", i)
			// A signature file edited to name the new hash still fails.
			forged := *s
			forged.ManifestHash = blake3.Sum256(m)
			require.ErrorIs(t, k.Public().Verify(&forged, forged.ManifestHash), ErrBadSignature, "byte %d", i)
		}
	}
	// Any changed bit of the signature fails.
	for i := range s.Ed25519 {
		bad := *s
		bad.Ed25519[i] ^= 0x10
		require.ErrorIs(t, k.Public().Verify(&bad, h), ErrBadSignature, "signature byte %d", i)
	}
}

func TestKeyFiles(t *testing.T) {
	dir := t.TempDir()
	name := filepath.Join(dir, "vault-release")
	k := testKey(t, 3)
	keyPath, pubPath, err := WriteKeyPair(name, k)
	require.NoError(t, err)
	require.Equal(t, name+".key", keyPath)
	require.Equal(t, name+".pub", pubPath)
	for path, mode := range map[string]fs.FileMode{keyPath: 0o600, pubPath: 0o644} {
		st, err := os.Stat(path)
		require.NoError(t, err)
		require.Equal(t, mode, st.Mode().Perm(), path)
	}
	priv, err := ReadPrivateKeyFile(keyPath)
	require.NoError(t, err)
	pub, err := ReadPublicKeyFile(pubPath)
	require.NoError(t, err)
	require.Equal(t, k.Public().ID(), pub.ID())

	h := blake3.Sum256([]byte("manifest"))
	sigPath := SignaturePath(filepath.Join(dir, "a.tkart"))
	require.Equal(t, filepath.Join(dir, "a.tkart.sig"), sigPath)
	require.NoError(t, WriteSignatureFile(sigPath, priv.Sign(h)))
	s, err := ReadSignatureFile(sigPath)
	require.NoError(t, err)
	require.NoError(t, pub.Verify(s, h))

	// Never replaces a key.
	before, err := os.ReadFile(keyPath)
	require.NoError(t, err)
	for _, existing := range []string{keyPath, pubPath} {
		other := filepath.Join(dir, "other")
		require.NoError(t, os.WriteFile(other+filepath.Ext(existing), []byte("x"), 0o600))
		_, _, err = WriteKeyPair(other, testKey(t, 4))
		require.ErrorIs(t, err, fs.ErrExist)
		os.Remove(other + filepath.Ext(existing))
	}
	_, _, err = WriteKeyPair(name, testKey(t, 5))
	require.ErrorIs(t, err, fs.ErrExist)
	after, err := os.ReadFile(keyPath)
	require.NoError(t, err)
	require.Equal(t, before, after)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 3, "the pair and the signature, no temporary or partial files")

	// A public key where a private one is expected, and the reverse.
	_, err = ReadPublicKeyFile(keyPath)
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "private key file")
	// A public key where the private one is needed is named as such, not
	// refused for the permissions a public key file rightly has.
	_, err = ReadPrivateKeyFile(pubPath)
	require.ErrorIs(t, err, ErrFormat)
	require.NotErrorIs(t, err, ErrKeyPermissions)
	require.Contains(t, err.Error(), pubPath+" is a public key")
}

// A private key file that group or others may read is refused.
func TestPrivateKeyPermissions(t *testing.T) {
	dir := t.TempDir()
	keyPath, _, err := WriteKeyPair(filepath.Join(dir, "k"), testKey(t, 6))
	require.NoError(t, err)
	for _, mode := range []fs.FileMode{0o640, 0o604, 0o644, 0o660, 0o602} {
		require.NoError(t, os.Chmod(keyPath, mode))
		_, err := ReadPrivateKeyFile(keyPath)
		require.ErrorIs(t, err, ErrKeyPermissions, "mode %04o", mode)
		require.Contains(t, err.Error(), keyPath)
	}
	for _, mode := range []fs.FileMode{0o600, 0o400} {
		require.NoError(t, os.Chmod(keyPath, mode))
		_, err := ReadPrivateKeyFile(keyPath)
		require.NoError(t, err, "mode %04o", mode)
	}
}

func TestParseRejects(t *testing.T) {
	k := testKey(t, 7)
	pub := string(k.Public().marshalText())
	priv := string(k.marshalText())
	sig := string(k.Sign(blake3.Sum256(nil)).marshalText())
	lines := func(s string) []string { return strings.Split(s, "\n") }
	cases := []struct {
		name  string
		parse func(string, []byte) error
		text  string
		want  string
	}{
		{"pub no final newline", parsePub, strings.TrimSuffix(pub, "\n"), "line feed"},
		{"pub crlf", parsePub, strings.ReplaceAll(pub, "\n", "\r\n"), "first line"},
		{"pub header", parsePub, strings.Replace(pub, "key 1", "key 2", 1), `"ternkit public key 2"`},
		{"pub extra line", parsePub, pub + "comment x\n", "4 lines"},
		{"pub label", parsePub, strings.Replace(pub, "ed25519 ", "ed448 ", 1), "line 3"},
		{"pub short key", parsePub, strings.Replace(pub, lines(pub)[2], "ed25519 AAAA", 1), `"AAAA"`},
		{"pub key id", parsePub, strings.Replace(pub, k.Public().ID(), "0000000000000000", 1), "does not match"},
		{"pub carriage return in base64", parsePub, strings.Replace(pub, "=\n", "=\r\n", 1), "base64"},
		{"pub too long", parsePub, pub + strings.Repeat("x", 2000), "longer"},
		{"priv header", parsePriv, strings.Replace(priv, "private", "secret", 1), "first line"},
		{"priv key id", parsePriv, strings.Replace(priv, k.Public().ID(), "0000000000000000", 1), "does not match"},
		{"priv seed", parsePriv, strings.Replace(priv, lines(priv)[2], "ed25519-seed !!", 1), `"!!"`},
		{"sig key id hex", parseSig, strings.Replace(sig, k.Public().ID(), "XYZ", 1), `"XYZ"`},
		{"sig hash upper", parseSig, strings.Replace(sig, lines(sig)[2], strings.ToUpper(lines(sig)[2]), 1), "line 3"},
		{"sig hash short", parseSig, strings.Replace(sig, lines(sig)[2], "manifest-blake3 abcd", 1), `"abcd"`},
		{"sig missing line", parseSig, strings.Replace(sig, lines(sig)[2]+"\n", "", 1), "3 lines"},
		{"sig non-canonical base64", parseSig, strings.Replace(sig, "==\n", "=A\n", 1), "base64"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := c.parse("f", []byte(c.text))
			require.ErrorIs(t, err, ErrFormat)
			require.Contains(t, err.Error(), c.want)
			require.Contains(t, err.Error(), "f: ")
		})
	}
}

func parsePub(what string, b []byte) error  { _, err := parsePublicKey(what, b); return err }
func parsePriv(what string, b []byte) error { _, err := parsePrivateKey(what, b); return err }
func parseSig(what string, b []byte) error  { _, err := parseSignature(what, b); return err }
