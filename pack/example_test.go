package pack_test

import (
	"bytes"
	"fmt"
	"log"
	"os"

	"ternkit/pack"
)

// A runtime opens an artifact, lists its tensors and decodes one: the
// decode checks the section's BLAKE3 before it trusts the bytes.
func ExampleOpen() {
	a, err := pack.Open("../testdata/vectors/ok-base3.tkart")
	if err != nil {
		log.Fatal(err)
	}
	defer a.Close()
	for _, e := range a.Tensors() {
		fmt.Println(e.Name, e.Kind, e.Codec, e.Shape)
	}
	t, err := a.Tensor("layer.w")
	if err != nil {
		log.Fatal(err)
	}
	trits := make([]int8, t.Len())
	if err := t.DecodeTrits(trits); err != nil {
		log.Fatal(err)
	}
	fmt.Println(trits)
	// Output:
	// layer.w ternary base3 [2 7]
	// layer.b kept raw [3]
	// empty.w ternary base3 [0 4]
	// step kept raw []
	// [1 -1 0 1 0 1 -1 0 0 -1 1 -1 0 1]
}

// NewReader reads from any io.ReaderAt: here the artifact's bytes in
// memory, as a runtime that maps the file would hold them. DecodeFloat32
// gives scale × trit.
func ExampleNewReader() {
	b, err := os.ReadFile("../testdata/vectors/ok-entropy.tkart")
	if err != nil {
		log.Fatal(err)
	}
	a, err := pack.NewReader(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		log.Fatal(err)
	}
	major, minor := a.Version()
	fmt.Printf("format %d.%d\n", major, minor)
	t, err := a.Tensor("tiny.w")
	if err != nil {
		log.Fatal(err)
	}
	w := make([]float32, t.Len())
	if err := t.DecodeFloat32(w); err != nil {
		log.Fatal(err)
	}
	fmt.Println(t.Entry.Codec, t.Entry.Scale, w)
	// Output:
	// format 1.1
	// entropy 0.40333334 [-0.40333334 0 0.40333334]
}

// Check reads everything a strict reader must before serving a model:
// padding, every section hash, every trit payload and its counts.
func ExampleArtifact_Check() {
	a, err := pack.Open("../testdata/vectors/bad-bits2-code3.tkart")
	if err != nil {
		log.Fatal(err)
	}
	defer a.Close()
	fmt.Println(a.Check())
	// Output:
	// ../testdata/vectors/bad-bits2-code3.tkart: section "layer.w": byte 64: invalid trit payload: bits2 byte 0 is 0xff (code 3 is reserved)
}

// EncodeTensor with Auto stores a sparse tensor (here 1 trit in 7 is
// nonzero) in the entropy codec, where it is smaller than base3.
func ExampleCodec_EncodeTensor() {
	sparse := make([]int8, 10000)
	for i := 0; i < len(sparse); i += 7 {
		sparse[i] = 1
	}
	p, c := pack.Auto.EncodeTensor(nil, sparse)
	fmt.Println(c, len(p) < pack.Base3.EncodedLen(len(sparse)))
	// Output:
	// entropy true
}
