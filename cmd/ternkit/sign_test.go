package main

import (
	"bytes"
	"encoding/binary"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// rehashManifest rewrites the trailer's manifest hash after an edit, as
// pack/FORMAT.md places it: the trailer is the last 64 bytes, holding the
// manifest offset and length (8 bytes each) and then its BLAKE3.
func rehashManifest(b []byte) {
	tr := len(b) - 64
	off := binary.LittleEndian.Uint64(b[tr:])
	n := binary.LittleEndian.Uint64(b[tr+8:])
	sum := blake3.Sum256(b[off : off+n])
	copy(b[tr+16:tr+48], sum[:])
}

func keygen(t *testing.T, dir, name string) (key, pub string) {
	t.Helper()
	base := filepath.Join(dir, name)
	code, out, errOut := ternkit("keygen", "-o", base)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "key-id ")
	return base + ".key", base + ".pub"
}

func TestSignAndVerifyWithKey(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	key, pub := keygen(t, dir, "fernmoss-release")
	st, err := os.Stat(key)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o600), st.Mode().Perm())

	// Keys are never replaced; a name given with its extension means the same pair.
	for _, name := range []string{"fernmoss-release", "fernmoss-release.key", "fernmoss-release.pub"} {
		code, _, errOut := ternkit("keygen", "-o", filepath.Join(dir, name))
		require.Equal(t, exitInput, code, name)
		require.Contains(t, errOut, "exists")
	}

	// No signature yet: a clear failure, exit 1.
	code, out, _ := ternkit("verify", art, "--key", pub)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, "no signature file "+art+".sig")

	code, out, errOut := ternkit("sign", art, "--key", key)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "wrote "+art+".sig")
	code, out, errOut = ternkit("verify", art, "--key", pub)
	require.Equal(t, exitOK, code, out+errOut)
	require.Contains(t, out, "signature: valid")

	// Another key's public half does not accept it.
	_, otherPub := keygen(t, dir, "someone-else")
	code, out, _ = ternkit("verify", art, "--key", otherPub)
	require.Equal(t, exitFailed, code)
	require.Contains(t, out, "another key")

	// A consistent rewrite of the manifest (trailer hash updated) passes
	// the integrity checks, but not the signature check.
	good := readFile(t, art)
	edited := bytes.Clone(good)
	i := bytes.Index(edited, []byte("Fernmoss Seed Vault"))
	require.Positive(t, i)
	edited[i] = 'f'
	rehashManifest(edited)
	tampered := filepath.Join(dir, "tampered.tkart")
	require.NoError(t, os.WriteFile(tampered, edited, 0o644))
	require.NoError(t, os.WriteFile(tampered+".sig", readFile(t, art+".sig"), 0o644))
	code, out, _ = ternkit("verify", tampered)
	require.Equal(t, exitOK, code, "without --key the rewrite is self-consistent: %s", out)
	code, out, _ = ternkit("verify", tampered, "--key", pub)
	require.Equal(t, exitFailed, code)
	require.Contains(t, out, "manifest changed since signing")

	// An edit without the rehash fails the structure check, and the
	// signature is reported unchecked.
	edited = bytes.Clone(good)
	edited[i] = 'f'
	require.NoError(t, os.WriteFile(tampered, edited, 0o644))
	code, out, _ = ternkit("verify", tampered, "--key", pub)
	require.Equal(t, exitFailed, code)
	require.Contains(t, out, "FAIL signature: not checked")

	// A damaged signature file is a failed check, not a usage error.
	require.NoError(t, os.WriteFile(tampered, good, 0o644))
	require.NoError(t, os.WriteFile(tampered+".sig", []byte("ternkit signature 1\n"), 0o644))
	code, out, _ = ternkit("verify", tampered, "--key", pub)
	require.Equal(t, exitFailed, code)
	require.Contains(t, out, "malformed")
}

func TestSignRefuses(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	key, pub := keygen(t, dir, "k")

	// A private key others can read.
	require.NoError(t, os.Chmod(key, 0o644))
	code, _, errOut := ternkit("sign", art, "--key", key)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "chmod 600 "+key)
	require.NoFileExists(t, art+".sig")
	require.NoError(t, os.Chmod(key, 0o600))

	// A corrupt artifact.
	b := readFile(t, art)
	b[len(b)/3] ^= 0x10
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	code, out, _ := ternkit("sign", bad, "--key", key)
	require.Equal(t, exitFailed, code)
	require.Contains(t, out, "refusing to sign")
	require.NoFileExists(t, bad+".sig")

	// Wrong kinds of key file, and missing flags.
	cases := [][]string{
		{"sign", art, "--key", pub},
		{"verify", art, "--key", key},
		{"sign", art},
		{"keygen"},
		{"verify", art, "--key", filepath.Join(dir, "missing.pub")},
	}
	for _, args := range cases {
		code, _, errOut := ternkit(args...)
		require.Equal(t, exitInput, code, "%v: %s", args, errOut)
	}
	require.NoFileExists(t, art+".sig")
}
