package verify

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
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
		rep, err := Run(art, Options{Signature: &Signature{Key: k, Path: sigPath}})
		require.NoError(t, err)
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
	rep, err = Run(bad, Options{Signature: &Signature{Key: key.Public(), Path: sigPath}})
	require.NoError(t, err)
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
		// what Run does first, without the section checks after it
		a, err := pack.Open(bad)
		opt := &Signature{Key: key.Public(), Path: sign.SignaturePath(bad)}
		rep := &Report{Artifact: bad}
		if err != nil {
			// a manifest the reader refuses: Run stops at the structure
			// check, and reports the signature as not checked
			rep, err = Run(bad, Options{Signature: opt})
			require.NoError(t, err)
		} else {
			checkSignature(rep, a.ManifestHash(), opt)
			a.Close()
		}
		require.False(t, signatureCheck(t, rep).OK, "manifest byte %d", i)
	}
}

// The signature is checked first, right after the manifest: before any
// section check in the report.
func TestSignatureCheckedFirst(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Base3, nil)
	key, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	rep, err := Run(art, Options{Signature: &Signature{Key: key.Public(), Path: sign.SignaturePath(art)}})
	require.NoError(t, err)
	require.Equal(t, CheckStructure, rep.Checks[0].Name)
	require.Equal(t, CheckSignature, rep.Checks[1].Name)
	require.False(t, rep.Checks[1].OK)
	require.Greater(t, len(rep.Checks), 2, "the sections are still checked")
}

// Signature and sections are read from one open file: a file renamed over
// the artifact's path between the signature check and the section checks
// changes neither outcome. With two opens of the path, the sections of the
// replacement (here: damaged) would be checked, against a signature made
// for the original, or a valid signature would vouch for bytes it never
// covered.
func TestSignatureAndSectionsFromOneOpenFile(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Bits2, nil)
	key, err := sign.GenerateKey(nil)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	require.NoError(t, sign.WriteSignatureFile(sign.SignaturePath(art), key.Sign(a.ManifestHash())))
	firstSection := a.Tensors()[0].Sections()[0].Offset
	a.Close()

	damaged := bytes.Clone(readBytes(t, art))
	damaged[firstSection] ^= 0xff
	swap := filepath.Join(dir, "swap.tkart")
	require.NoError(t, os.WriteFile(swap, damaged, 0o644))
	swapped := false
	opts := Options{Signature: &Signature{Key: key.Public(), Path: sign.SignaturePath(art)}}
	opts.afterSignature = func() {
		if fds, err := os.ReadDir("/proc/self/fd"); err == nil { // Linux: count the open files of the path
			open := 0
			for _, fd := range fds {
				if target, err := os.Readlink(filepath.Join("/proc/self/fd", fd.Name())); err == nil && target == art {
					open++
				}
			}
			require.Equal(t, 1, open, "one open file of the artifact")
		}
		require.NoError(t, os.Rename(swap, art))
		swapped = true
	}
	rep, err := Run(art, opts)
	require.NoError(t, err)
	require.True(t, swapped)
	require.True(t, rep.OK(), "the checked bytes are the ones opened, which were signed: %+v", rep.Failures())
	require.True(t, signatureCheck(t, rep).OK)

	// the path now holds the damaged file: a fresh run fails its section
	rep, err = Run(art, Options{Signature: &Signature{Key: key.Public(), Path: sign.SignaturePath(art)}})
	require.NoError(t, err)
	require.False(t, rep.OK())
	require.True(t, signatureCheck(t, rep).OK, "the manifest is unchanged")
	require.NotEmpty(t, rep.Failures())
}

func readBytes(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

// Digests of the whole artifact, read from the open file, equal
// crypto/sha256 and BLAKE3 over the file's bytes, mapped or not.
func TestReportDigests(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Base3, nil)
	b := readBytes(t, art)
	want256 := sha256.Sum256(b)
	want3 := blake3.Sum256(b)
	rep, err := Run(art, Options{Digests: true})
	require.NoError(t, err)
	require.True(t, rep.OK())
	require.Equal(t, hex.EncodeToString(want256[:]), rep.SHA256)
	require.Equal(t, hex.EncodeToString(want3[:]), rep.BLAKE3)
	rep, err = RunReaderAt(art, bytes.NewReader(b), int64(len(b)), Options{Digests: true})
	require.NoError(t, err)
	require.Equal(t, hex.EncodeToString(want256[:]), rep.SHA256)
	require.Equal(t, hex.EncodeToString(want3[:]), rep.BLAKE3)
	rep, err = Run(art, Options{})
	require.NoError(t, err)
	require.Empty(t, rep.SHA256)
}
