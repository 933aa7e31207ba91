package sign_test

import (
	"crypto/ed25519"
	"encoding/base64"
	"encoding/hex"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/sign"
)

// specFields reads a file as sign/FORMAT.md lays it out: a header line,
// then "LABEL VALUE" lines, each ended by a line feed.
func specFields(t *testing.T, path, header string) map[string]string {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	lines := strings.Split(string(b), "\n")
	require.Equal(t, "", lines[len(lines)-1], "ends with a line feed")
	require.Equal(t, header, lines[0])
	fields := map[string]string{}
	for _, l := range lines[1 : len(lines)-1] {
		label, value, ok := strings.Cut(l, " ")
		require.True(t, ok, l)
		fields[label] = value
	}
	return fields
}

func specBase64(t *testing.T, s string) []byte {
	t.Helper()
	b, err := base64.StdEncoding.DecodeString(s) // RFC 4648 section 4 alphabet, padded
	require.NoError(t, err)
	return b
}

// Files written by the package are checked here from the spec alone, with
// crypto/ed25519 and BLAKE3, not through the package's own parsers.
func TestFilesFollowTheSpec(t *testing.T) {
	dir := t.TempDir()
	k, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	keyPath, pubPath, err := sign.WriteKeyPair(filepath.Join(dir, "fernmoss-release"), k)
	require.NoError(t, err)
	manifestHash := blake3.Sum256([]byte(`{"format":"ternkit-artifact"}`))
	sigPath := sign.SignaturePath(filepath.Join(dir, "scout.tkart"))
	require.NoError(t, sign.WriteSignatureFile(sigPath, k.Sign(manifestHash)))

	pubFields := specFields(t, pubPath, "ternkit public key 1")
	privFields := specFields(t, keyPath, "ternkit private key 1")
	sigFields := specFields(t, sigPath, "ternkit signature 1")

	pub := specBase64(t, pubFields["ed25519"])
	require.Len(t, pub, ed25519.PublicKeySize)
	idSum := blake3.Sum256(pub)
	keyID := hex.EncodeToString(idSum[:8])
	require.Equal(t, keyID, pubFields["key-id"])
	require.Equal(t, keyID, privFields["key-id"])
	require.Equal(t, keyID, sigFields["key-id"])

	seed := specBase64(t, privFields["ed25519-seed"])
	require.Len(t, seed, ed25519.SeedSize)
	require.Equal(t, ed25519.PublicKey(pub), ed25519.NewKeyFromSeed(seed).Public())

	require.Equal(t, hex.EncodeToString(manifestHash[:]), sigFields["manifest-blake3"])
	sig := specBase64(t, sigFields["ed25519"])
	msg := append([]byte("ternkit signature 1\x00"), manifestHash[:]...)
	require.Len(t, msg, 52)
	require.True(t, ed25519.Verify(pub, msg, sig))
	msg[len(msg)-1] ^= 1
	require.False(t, ed25519.Verify(pub, msg, sig))
}
