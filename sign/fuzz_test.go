package sign

import (
	"bytes"
	"crypto/x509"
	"encoding/pem"
	"testing"

	"github.com/zeebo/blake3"
)

// Every accepted file is in canonical form: writing what was parsed gives
// the same bytes.
func fuzzCanonical[T any](f *testing.F, seed []byte, parse func(string, []byte) (T, error), marshal func(T) []byte) {
	f.Add(seed)
	f.Add([]byte{})
	f.Add(bytes.ReplaceAll(seed, []byte("\n"), []byte("\r\n")))
	f.Fuzz(func(t *testing.T, b []byte) {
		v, err := parse("fuzz", b)
		if err != nil {
			return
		}
		if got := marshal(v); !bytes.Equal(got, b) {
			t.Fatalf("accepted %q, writes %q", b, got)
		}
	})
}

func fuzzKey() *PrivateKey {
	k, err := GenerateKey(bytes.NewReader(bytes.Repeat([]byte{9}, 64)))
	if err != nil {
		panic(err)
	}
	return k
}

func FuzzParsePublicKey(f *testing.F) {
	fuzzCanonical(f, fuzzKey().Public().marshalText(), parsePublicKey, (*PublicKey).marshalText)
}

func FuzzParsePrivateKey(f *testing.F) {
	fuzzCanonical(f, fuzzKey().marshalText(), parsePrivateKey, (*PrivateKey).marshalText)
}

func FuzzParseSignature(f *testing.F) {
	fuzzCanonical(f, fuzzKey().Sign(blake3.Sum256(nil)).marshalText(), parseSignature, (*Signature).marshalText)
}

// Key files of other tools: any input gives a key or an error, never a
// panic; an accepted public key is a safe point, an accepted private key
// derives a safe public key, and the other reader says it is the other
// kind.
func FuzzParseForeignKeys(f *testing.F) {
	k := fuzzKey()
	pub := k.Public().key
	der, err := x509.MarshalPKCS8PrivateKey(k.key)
	if err != nil {
		panic(err)
	}
	spki, err := x509.MarshalPKIXPublicKey(pub)
	if err != nil {
		panic(err)
	}
	f.Add(pem.EncodeToMemory(&pem.Block{Type: pemPKCS8, Bytes: der}))
	f.Add(pem.EncodeToMemory(&pem.Block{Type: pemSPKI, Bytes: spki}))
	f.Add(opensshPrivate(k.key, "none", 0x01020304, "fernmoss"))
	f.Add([]byte("ssh-ed25519 " + b64.EncodeToString(sshPublicBlob(pub)) + " fernmoss\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		if p, err := parseAnyPublicKey("fuzz", b); err == nil {
			if err := checkPublicKey(p.key); err != nil {
				t.Fatalf("accepted an unsafe key: %v", err)
			}
		}
		if s, err := parseAnyPrivateKey("fuzz", b); err == nil {
			if err := checkPublicKey(s.Public().key); err != nil {
				t.Fatalf("accepted a private key with an unsafe public key: %v", err)
			}
		}
	})
}

// Signatures in either form: any input gives a signature or an error;
// an accepted SSH signature writes back to the same bytes.
func FuzzParseAnySignature(f *testing.F) {
	k := fuzzKey()
	h := blake3.Sum256(nil)
	f.Add(k.SignSSH(h).marshalSSH())
	f.Add(k.Sign(h).marshalText())
	f.Fuzz(func(t *testing.T, b []byte) {
		s, err := parseAnySignature("fuzz", b)
		if err != nil || s.ssh == nil {
			return
		}
		_ = k.Public().Verify(s, h)
		if got := s.marshalSSH(); !bytes.Equal(got, b) {
			// PEM allows other line widths and whitespace; the decoded
			// signature must still write back to what it decoded from
			again, err := parseAnySignature("fuzz", got)
			if err != nil || again.Ed25519 != s.Ed25519 || !bytes.Equal(again.ssh.key, s.ssh.key) ||
				again.ssh.namespace != s.ssh.namespace || again.ssh.hash != s.ssh.hash {
				t.Fatalf("accepted %q, writes %q, which reads back as %+v, %v", b, got, again, err)
			}
		}
	})
}
