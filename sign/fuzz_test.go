package sign

import (
	"bytes"
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
