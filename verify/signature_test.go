package verify

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/pack"
	"ternkit/sign"
)

func signatureCheck(t *testing.T, rep *Report) Check {
	t.Helper()
	for _, c := range rep.Checks {
		if c.Name == CheckSignature {
			return c
		}
	}
	t.Fatalf("no %s check in %+v", CheckSignature, rep.Checks)
	return Check{}
}

func TestSignatureCheck(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Base3, nil)
	key, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	other, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	sigPath := sign.SignaturePath(art)
	run := func(k *sign.PublicKey) *Report {
		rep, err := Run(art, Options{})
		require.NoError(t, err)
		AddSignatureCheck(rep, art, k, sigPath)
		return rep
	}

	c := signatureCheck(t, run(key.Public()))
	require.False(t, c.OK)
	require.Contains(t, c.Detail, "no signature file "+sigPath)

	a, err := pack.Open(art)
	require.NoError(t, err)
	hash := a.ManifestHash()
	a.Close()
	require.NoError(t, sign.WriteSignatureFile(sigPath, key.Sign(hash)))
	rep := run(key.Public())
	require.True(t, rep.OK(), "%+v", rep.Failures())
	require.Contains(t, signatureCheck(t, rep).Detail, key.Public().ID())

	c = signatureCheck(t, run(other.Public()))
	require.False(t, c.OK)
	require.Contains(t, c.Detail, "another key")

	// Signed over a different manifest.
	hash[0] ^= 1
	require.NoError(t, sign.WriteSignatureFile(sigPath, key.Sign(hash)))
	c = signatureCheck(t, run(key.Public()))
	require.False(t, c.OK)
	require.Contains(t, c.Detail, "manifest changed since signing")

	// An unreadable artifact reports the signature as not checked.
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, []byte("not an artifact"), 0o644))
	rep = &Report{Artifact: bad}
	AddSignatureCheck(rep, bad, key.Public(), sigPath)
	require.False(t, rep.OK())
	require.Contains(t, signatureCheck(t, rep).Detail, "not checked")
}

// Any changed manifest byte, even with the trailer's hash updated to match
// (so that the artifact is self-consistent again), fails the signature
// check.
func TestSignatureCoversEveryManifestByte(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Bits2, nil)
	key, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	start, end := a.ManifestOffset(), a.Size()-pack.TrailerLen
	sig := key.Sign(a.ManifestHash())
	a.Close()
	good, err := os.ReadFile(art)
	require.NoError(t, err)
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, sign.WriteSignatureFile(sign.SignaturePath(bad), sig))
	for i := start; i < end; i++ {
		b := bytes.Clone(good)
		b[i] ^= 0x01
		// The trailer holds the manifest's BLAKE3 at bytes 16..48 (pack/FORMAT.md).
		sum := blake3.Sum256(b[start:end])
		copy(b[end+16:end+48], sum[:])
		require.NoError(t, os.WriteFile(bad, b, 0o644))
		rep := &Report{Artifact: bad}
		AddSignatureCheck(rep, bad, key.Public(), sign.SignaturePath(bad))
		require.False(t, signatureCheck(t, rep).OK, "manifest byte %d", i)
	}
}
