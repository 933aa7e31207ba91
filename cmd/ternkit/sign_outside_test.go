package main

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/internal/outsidetool"
)

// tool runs an outside tool and returns its stdout; it fails the test
// when the tool fails.
func tool(t *testing.T, stdin []byte, name string, args ...string) []byte {
	t.Helper()
	out, err := toolErr(stdin, name, args...)
	require.NoError(t, err, "%s %s", name, strings.Join(args, " "))
	return out
}

func toolErr(stdin []byte, name string, args ...string) ([]byte, error) {
	cmd := exec.Command(name, args...)
	cmd.Stdin = bytes.NewReader(stdin)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		return out, &toolError{err, stderr.String()}
	}
	return out, nil
}

type toolError struct {
	err    error
	stderr string
}

func (e *toolError) Error() string { return e.err.Error() + ": " + e.stderr }

// flipped writes a copy of the artifact with one section byte changed.
func flipped(t *testing.T, art string) string {
	t.Helper()
	b := readFile(t, art)
	b[200] ^= 0x01 // inside the first sections of the demo artifact
	bad := strings.TrimSuffix(art, ".tkart") + "-flipped.tkart"
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	code, _, _ := ternkit("verify", bad)
	require.Equal(t, exitFailed, code, "the flipped byte is caught without a key")
	return bad
}

// Keys from openssl genpkey (Debian: openssl) and ssh-keygen -t ed25519
// (Debian: openssh-client) sign artifacts that verify with their public
// halves; a flipped artifact byte fails, with the verdict first.
func TestSignWithOutsideKeys(t *testing.T) {
	openssl := outsidetool.Require(t, "openssl", "openssl")
	sshKeygen := outsidetool.Require(t, "ssh-keygen", "openssh-client")
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	bad := flipped(t, art)

	pemKey, pemPub := filepath.Join(dir, "vault.pem"), filepath.Join(dir, "vault.pub.pem")
	tool(t, nil, openssl, "genpkey", "-algorithm", "ed25519", "-out", pemKey)
	tool(t, nil, openssl, "pkey", "-in", pemKey, "-pubout", "-out", pemPub)
	require.NoError(t, os.Chmod(pemKey, 0o600))
	sshKey := filepath.Join(dir, "vault_ed25519")
	tool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "", "-C", "release@fernmoss", "-f", sshKey)

	for _, c := range []struct{ name, key, pub string }{
		{"openssl", pemKey, pemPub},
		{"ssh-keygen", sshKey, sshKey + ".pub"},
	} {
		for _, format := range []string{"ternkit", "ssh"} {
			t.Run(c.name+"/"+format, func(t *testing.T) {
				sig := filepath.Join(dir, c.name+"-"+format+".sig")
				code, out, errOut := ternkit("sign", art, "--key", c.key, "--format", format, "-o", sig)
				require.Equal(t, exitOK, code, errOut)
				require.Contains(t, out, "("+format+" form)")
				code, out, errOut = ternkit("verify", art, "--key", c.pub, "--sig", sig)
				require.Equal(t, exitOK, code, out+errOut)
				lines := strings.Split(out, "\n")
				require.True(t, strings.HasPrefix(lines[0], "verify: ok"), out)
				require.True(t, strings.HasPrefix(lines[1], "signature: valid, "+format+" signature by key"), out)

				code, out, _ = ternkit("verify", bad, "--key", c.pub, "--sig", sig)
				require.Equal(t, exitFailed, code, out)
				require.True(t, strings.HasPrefix(out, "verify: FAILED"), "the verdict comes first:\n%s", out)
				require.NotContains(t, out, "signature: valid", "no reassuring line when the verdict is FAILED")
				require.Contains(t, out, "FAIL section_hash")
			})
		}
	}

	// sign given a public key says so, whatever its form
	for _, pub := range []string{pemPub, sshKey + ".pub"} {
		code, _, errOut := ternkit("sign", art, "--key", pub)
		require.Equal(t, exitInput, code)
		require.Contains(t, errOut, pub+" is a public key")
		require.NotContains(t, errOut, "permissions")
	}
	// an encrypted OpenSSH key: the way to decrypt it, no prompt
	enc := filepath.Join(dir, "enc_ed25519")
	tool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "fernmoss-passphrase", "-f", enc)
	code, _, errOut := ternkit("sign", art, "--key", enc)
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "ssh-keygen -p -N ''")
	// --sig needs --key
	code, _, errOut = ternkit("verify", art, "--sig", filepath.Join(dir, "x.sig"))
	require.Equal(t, exitInput, code)
	require.Contains(t, errOut, "--sig")
}

// The SSH signature path, both ways, over the message the README names:
// ternkit sign --print-message writes it; ssh-keygen -Y sign over it
// verifies with ternkit verify --key; ternkit sign --format ssh verifies
// with ssh-keygen -Y verify; a changed artifact or another namespace fails
// both.
func TestSSHSignaturesBothWays(t *testing.T) {
	sshKeygen := outsidetool.Require(t, "ssh-keygen", "openssh-client")
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	key := filepath.Join(dir, "release_ed25519")
	tool(t, nil, sshKeygen, "-q", "-t", "ed25519", "-N", "", "-C", "release@fernmoss", "-f", key)
	signers := filepath.Join(dir, "allowed_signers")
	require.NoError(t, os.WriteFile(signers, append([]byte("release@fernmoss "), readFile(t, key+".pub")...), 0o644))

	code, msg, errOut := ternkit("sign", art, "--print-message")
	require.Equal(t, exitOK, code, errOut)
	// the message is the 52 bytes of sign/FORMAT.md: the text
	// "ternkit signature 1", a zero byte, the manifest BLAKE3 inspect prints
	_, out, _ := ternkit("inspect", art, "--json")
	var summary struct {
		ManifestBLAKE3 string `json:"manifest_blake3"`
	}
	require.NoError(t, json.Unmarshal([]byte(out), &summary))
	hash, err := hex.DecodeString(summary.ManifestBLAKE3)
	require.NoError(t, err)
	require.Equal(t, append([]byte("ternkit signature 1\x00"), hash...), []byte(msg))

	// an artifact with an edited manifest (trailer rehashed: self-consistent)
	edited := readFile(t, art)
	i := bytes.Index(edited, []byte("Fernmoss Seed Vault"))
	require.Positive(t, i)
	edited[i] = 'f'
	rehashManifest(edited)
	changed := filepath.Join(dir, "changed.tkart")
	require.NoError(t, os.WriteFile(changed, edited, 0o644))
	code, changedMsg, _ := ternkit("sign", changed, "--print-message")
	require.Equal(t, exitOK, code)
	require.NotEqual(t, msg, changedMsg)

	verifyArgs := func(ns, sig string) []string {
		return []string{"-Y", "verify", "-f", signers, "-I", "release@fernmoss", "-n", ns, "-s", sig}
	}

	// ssh-keygen signs, ternkit verifies
	theirs := filepath.Join(dir, "theirs.sig")
	require.NoError(t, os.WriteFile(theirs, tool(t, []byte(msg), sshKeygen, "-Y", "sign", "-q", "-f", key, "-n", "ternkit-artifact"), 0o644))
	code, out, errOut = ternkit("verify", art, "--key", key+".pub", "--sig", theirs)
	require.Equal(t, exitOK, code, out+errOut)
	code, out, _ = ternkit("verify", changed, "--key", key+".pub", "--sig", theirs)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, "FAIL signature")
	otherNS := filepath.Join(dir, "other-namespace.sig")
	require.NoError(t, os.WriteFile(otherNS, tool(t, []byte(msg), sshKeygen, "-Y", "sign", "-q", "-f", key, "-n", "file"), 0o644))
	code, out, _ = ternkit("verify", art, "--key", key+".pub", "--sig", otherNS)
	require.Equal(t, exitFailed, code, out)
	require.Contains(t, out, `namespace "file"`)

	// ternkit signs, ssh-keygen verifies
	code, _, errOut = ternkit("sign", art, "--key", key, "--format", "ssh")
	require.Equal(t, exitOK, code, errOut)
	ours := art + ".sig"
	tool(t, []byte(msg), sshKeygen, verifyArgs("ternkit-artifact", ours)...)
	_, err = toolErr([]byte(changedMsg), sshKeygen, verifyArgs("ternkit-artifact", ours)...)
	require.Error(t, err, "ssh-keygen refuses the changed artifact's message")
	_, err = toolErr([]byte(msg), sshKeygen, verifyArgs("file", ours)...)
	require.Error(t, err, "ssh-keygen refuses another namespace")
	// and ternkit verifies its own SSH signature from the default path
	code, out, errOut = ternkit("verify", art, "--key", key+".pub")
	require.Equal(t, exitOK, code, out+errOut)
}

// The SHA-256 that pack, inspect and verify print in --json is what
// sha256sum (GNU coreutils) prints for the artifact, and verify's BLAKE3
// is what b3sum (the BLAKE3 reference CLI) prints.
func TestDigestsAgainstSHA256Sum(t *testing.T) {
	sha256sum := outsidetool.Require(t, "sha256sum", "coreutils")
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	field := func(out []byte) string { f, _, _ := strings.Cut(string(out), " "); return f }
	var got struct {
		SHA256 string `json:"sha256"`
		BLAKE3 string `json:"blake3"`
	}
	packed := filepath.Join(dir, "again.tkart")
	for _, c := range []struct {
		file string
		args []string
	}{
		{packed, []string{"pack", src, "-o", packed, "--json"}},
		{art, []string{"inspect", art, "--json"}},
		{art, []string{"verify", art, "--json"}},
	} {
		code, out, errOut := ternkit(c.args...)
		require.Equal(t, exitOK, code, errOut)
		require.NoError(t, json.Unmarshal([]byte(out), &got))
		require.Equal(t, field(tool(t, nil, sha256sum, c.file)), got.SHA256, "%v", c.args)
	}
	require.Equal(t, field(tool(t, nil, b3sum, art)), got.BLAKE3, "verify --json blake3")
}

// sign's flags that cannot go together, and outputs that would replace an
// input, are usage errors that write nothing.
func TestSignRefusals(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	key, _ := keygen(t, dir, "vault")
	before := readFile(t, art)
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"sign", art, "--key", key, "-o", art}, "is an input"},
		{[]string{"sign", art, "--key", key, "-o", key}, "is an input"},
		{[]string{"sign", art, "--print-message", "--key", key}, "drop --key"},
		{[]string{"sign", art, "--key", key, "--format", "pgp"}, `"pgp"`},
		{[]string{"sign", art}, "needs --key"},
	} {
		code, _, errOut := ternkit(c.args...)
		require.Equal(t, exitInput, code, "%v", c.args)
		require.Contains(t, errOut, c.want, "%v", c.args)
	}
	require.Equal(t, before, readFile(t, art))
	_, err := os.Stat(art + ".sig")
	require.ErrorIs(t, err, os.ErrNotExist)
}
