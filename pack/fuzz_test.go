package pack

import (
	"bytes"
	"errors"
	"reflect"
	"testing"

	"ternkit/internal/alloccount"
	"ternkit/manifest"
)

// readBounded opens b as FuzzOpen does and checks the properties every
// input must have: an error is a *FormatError; NewReader allocates within
// a bound proportional to the input (a declared manifest length never
// allocates more than the file holds); and an accepted manifest survives
// encode → decode unchanged (parse → write → parse).
func readBounded(t *testing.T, b []byte) (*Artifact, error) {
	t.Helper()
	var a *Artifact
	var err error
	if n := alloccount.Bytes(func() { a, err = NewReader(bytes.NewReader(b), int64(len(b))) }); n > 64*uint64(len(b))+1<<20 {
		t.Fatalf("NewReader of %d bytes allocated %d bytes", len(b), n)
	}
	if err != nil {
		var fe *FormatError
		if !errors.As(err, &fe) {
			t.Fatalf("error is not a *FormatError: %v", err)
		}
		return nil, err
	}
	body, err := manifest.Encode(a.Manifest())
	if err != nil {
		t.Fatalf("encode an accepted manifest: %v", err)
	}
	again, err := manifest.Decode(body)
	if err != nil {
		t.Fatalf("re-encoded manifest rejected: %v", err)
	}
	if !reflect.DeepEqual(again, a.Manifest()) {
		t.Fatalf("manifest changed in encode → decode:\n%+v\n%+v", a.Manifest(), again)
	}
	return a, nil
}

// decodeBounded decodes tn into a buffer sized from its shape and checks
// that decoding allocates no more than its sections declare: the payload
// and scales read once, the trits unpacked once, and a fixed allowance.
func decodeBounded(t *testing.T, tn *Tensor) {
	t.Helper()
	dst := make([]float32, tn.Len())
	var declared uint64
	for _, s := range tn.Entry.Sections() {
		declared += uint64(s.Length)
	}
	bound := 2*declared + uint64(tn.Len()) + 1<<20
	if n := alloccount.Bytes(func() { _ = tn.DecodeFloat32(dst) }); n > bound {
		t.Fatalf("tensor %q: decoding %d declared bytes into %d values allocated %d bytes", tn.Entry.Name, declared, len(dst), n)
	}
}
