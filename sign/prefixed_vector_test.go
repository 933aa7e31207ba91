package sign

import (
	"crypto/ed25519"
	"encoding/base64"
	"encoding/hex"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// ternkit's own signing, checked against the standard library's ed25519
// (an RFC 8032 implementation) over the message sign/FORMAT.md, "What is
// signed", describes, written out here byte by byte: the 19 ASCII bytes of
// "ternkit signature 1", a zero byte, then the 32 hash bytes (here 0x00 to
// 0x1f). The key is RFC 8032's section 7.1 TEST 1 secret (from memory of
// the RFC's published vectors), read through the key file as a user would.
func TestPrefixedSignatureVector(t *testing.T) {
	seed, err := hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	require.NoError(t, err)
	public, err := hex.DecodeString("d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")
	require.NoError(t, err)
	var hash [32]byte
	for i := range hash {
		hash[i] = byte(i)
	}
	msg, err := hex.DecodeString(
		"7465726e6b6974" + "20" + "7369676e6174757265" + "20" + "31" + // "ternkit" " " "signature" " " "1"
			"00" +
			"000102030405060708090a0b0c0d0e0f101112131415161718191a1b1c1d1e1f")
	require.NoError(t, err)
	require.Len(t, msg, 52)
	want := ed25519.Sign(ed25519.NewKeyFromSeed(seed), msg)

	sum := blake3.Sum256(public)
	id := hex.EncodeToString(sum[:8])
	dir := t.TempDir()
	keyPath, pubPath := filepath.Join(dir, "rfc.key"), filepath.Join(dir, "rfc.pub")
	b64 := base64.StdEncoding
	require.NoError(t, os.WriteFile(keyPath, []byte("ternkit private key 1\nkey-id "+id+"\ned25519-seed "+b64.EncodeToString(seed)+"\n"), 0o600))
	require.NoError(t, os.WriteFile(pubPath, []byte("ternkit public key 1\nkey-id "+id+"\ned25519 "+b64.EncodeToString(public)+"\n"), 0o644))
	priv, err := ReadPrivateKeyFile(keyPath)
	require.NoError(t, err)
	pub, err := ReadPublicKeyFile(pubPath)
	require.NoError(t, err)

	s := priv.Sign(hash)
	require.Equal(t, id, s.KeyID)
	require.Equal(t, hash, s.ManifestHash)
	require.Equal(t, want, s.Ed25519[:], "ternkit's signature is ed25519 over the prefixed message")
	require.True(t, ed25519.Verify(ed25519.PublicKey(public), msg, s.Ed25519[:]))
	require.NoError(t, pub.Verify(s, hash))

	// a signature over the bare hash, as a key used elsewhere might make,
	// is not a ternkit signature
	bare := *s
	copy(bare.Ed25519[:], ed25519.Sign(ed25519.NewKeyFromSeed(seed), hash[:]))
	err = pub.Verify(&bare, hash)
	require.ErrorIs(t, err, ErrBadSignature)
}
