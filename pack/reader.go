package pack

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"runtime"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/inputfile"
	"ternkit/manifest"
)

// Artifact is an opened artifact. Opening checks the preamble, the trailer,
// the manifest hash, the manifest's rules and the section layout; section
// hashes and payloads are checked by the verify package or on decode.
type Artifact struct {
	file         string
	r            io.ReaderAt
	closer       io.Closer
	size         int64
	m            *manifest.Manifest
	minor        uint16
	manifestHash [32]byte
	manifestOff  int64
	index        map[string]int
}

// Open opens the artifact at path.
func Open(path string, opts ...ReadOption) (*Artifact, error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return nil, err
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, err
	}
	a, err := newArtifact(path, f, st.Size(), opts)
	if err != nil {
		f.Close()
		return nil, err
	}
	a.closer = f
	return a, nil
}

// NewReader reads an artifact of the given size from r.
func NewReader(r io.ReaderAt, size int64, opts ...ReadOption) (*Artifact, error) {
	return newArtifact("", r, size, opts)
}

func newArtifact(file string, r io.ReaderAt, size int64, opts []ReadOption) (*Artifact, error) {
	fail := func(where string, off int64, err error) error {
		return &FormatError{File: file, Where: where, Offset: off, Err: err}
	}
	if size < PreambleLen+TrailerLen {
		return nil, fail("file", size, fmt.Errorf("%w: %d bytes is shorter than preamble and trailer (%d)", ErrStructure, size, PreambleLen+TrailerLen))
	}
	pre := make([]byte, PreambleLen)
	if _, err := r.ReadAt(pre, 0); err != nil {
		return nil, fail("preamble", 0, err)
	}
	if off, err := checkPreamble(pre); err != nil {
		return nil, fail("preamble", off, err)
	}
	tr := make([]byte, TrailerLen)
	if _, err := r.ReadAt(tr, size-TrailerLen); err != nil {
		return nil, fail("trailer", size-TrailerLen, err)
	}
	t, off, err := decodeTrailer(tr, size, applyReadOptions(opts).maxManifest)
	if err != nil {
		return nil, fail("trailer", size-TrailerLen+off, err)
	}
	body := make([]byte, t.manifestLen)
	if _, err := r.ReadAt(body, t.manifestOffset); err != nil {
		return nil, fail("manifest", t.manifestOffset, err)
	}
	if got := blake3.Sum256(body); got != t.manifestHash {
		return nil, fail("manifest", t.manifestOffset, fmt.Errorf("%w: BLAKE3 %x, trailer records %x", ErrHash, got, t.manifestHash))
	}
	m, err := manifest.Decode(body)
	if err != nil {
		return nil, fail("manifest", t.manifestOffset, err)
	}
	minor := preambleMinor(pre)
	if err := checkMinorVersion(m, minor); err != nil {
		return nil, fail("preamble", 10, err)
	}
	a := &Artifact{file: file, r: r, size: size, m: m, minor: minor, manifestHash: t.manifestHash, manifestOff: t.manifestOffset, index: make(map[string]int, len(m.Tensors))}
	next := int64(PreambleLen)
	for i, e := range m.Tensors {
		a.index[e.Name] = i
		where := fmt.Sprintf("manifest: tensor %q", e.Name)
		for _, s := range e.Sections() {
			if s.Offset != next {
				return nil, fail(where, t.manifestOffset,
					fmt.Errorf("%w: section offset %d (layout puts it at %d)", ErrStructure, s.Offset, next))
			}
			if s.Length > t.manifestOffset-next {
				return nil, fail(where, t.manifestOffset,
					fmt.Errorf("%w: section of %d bytes at %d runs past the manifest at %d", ErrStructure, s.Length, next, t.manifestOffset))
			}
			next = alignUp(s.Offset + s.Length)
		}
	}
	for _, c := range m.Companions {
		s := c.Section
		where := fmt.Sprintf("manifest: companion %q", c.Name)
		if s.Offset != next {
			return nil, fail(where, t.manifestOffset,
				fmt.Errorf("%w: section offset %d (layout puts it at %d)", ErrStructure, s.Offset, next))
		}
		if s.Length > t.manifestOffset-next {
			return nil, fail(where, t.manifestOffset,
				fmt.Errorf("%w: section of %d bytes at %d runs past the manifest at %d", ErrStructure, s.Length, next, t.manifestOffset))
		}
		next = alignUp(s.Offset + s.Length)
	}
	if next != t.manifestOffset {
		return nil, fail("trailer", size-TrailerLen,
			fmt.Errorf("%w: manifest offset %d (layout puts it at %d)", ErrStructure, t.manifestOffset, next))
	}
	return a, nil
}

// Close releases the file opened by Open.
func (a *Artifact) Close() error {
	if a.closer == nil {
		return nil
	}
	return a.closer.Close()
}

// Version is the artifact's format version from its preamble.
func (a *Artifact) Version() (major, minor int) { return majorVersion, int(a.minor) }

// Manifest returns the decoded manifest. Callers must not modify it.
func (a *Artifact) Manifest() *manifest.Manifest { return a.m }

// ManifestHash is the BLAKE3 of the manifest bytes, as the trailer records.
func (a *Artifact) ManifestHash() [32]byte { return a.manifestHash }

// ManifestOffset is where the manifest starts, after the last section.
func (a *Artifact) ManifestOffset() int64 { return a.manifestOff }

// Size is the artifact's size in bytes.
func (a *Artifact) Size() int64 { return a.size }

// ReaderAt gives raw access to the artifact bytes.
func (a *Artifact) ReaderAt() io.ReaderAt { return a.r }

// Tensors lists the tensor entries in file order.
func (a *Artifact) Tensors() []manifest.Tensor { return a.m.Tensors }

// Tensor returns the named tensor.
func (a *Artifact) Tensor(name string) (*Tensor, error) {
	i, ok := a.index[name]
	if !ok {
		return nil, fmt.Errorf("%w %q", ErrNoTensor, name)
	}
	return &Tensor{a: a, Entry: a.m.Tensors[i]}, nil
}

// Tensor is one tensor of an artifact.
type Tensor struct {
	a     *Artifact
	Entry manifest.Tensor
}

// Len is the element count.
func (t *Tensor) Len() int { return int(manifest.NumElements(t.Entry.Shape)) }

// Payload reads the section bytes, without checking their hash.
func (t *Tensor) Payload() ([]byte, error) {
	p := make([]byte, t.Entry.Section.Length)
	if _, err := t.a.r.ReadAt(p, t.Entry.Section.Offset); err != nil {
		return nil, t.fail(t.Entry.Section.Offset, err)
	}
	return p, nil
}

// VerifiedPayload reads the section bytes and checks them against the
// BLAKE3 the manifest records (ErrHash on a mismatch).
func (t *Tensor) VerifiedPayload() ([]byte, error) {
	return t.verifiedSection(t.Entry.Section)
}

// verifiedSection reads a section of the tensor and checks its BLAKE3.
func (t *Tensor) verifiedSection(s manifest.Section) ([]byte, error) {
	p := make([]byte, s.Length)
	if _, err := t.a.r.ReadAt(p, s.Offset); err != nil {
		return nil, t.fail(s.Offset, err)
	}
	if err := checkSectionBytes(p, s, "section", runtime.GOMAXPROCS(0), t.fail); err != nil {
		return nil, err
	}
	return p, nil
}

func (t *Tensor) fail(off int64, err error) error {
	return &FormatError{File: t.a.file, Where: fmt.Sprintf("section %q", t.Entry.Name), Offset: off, Err: err}
}

// ErrKind reports a decode the tensor's kind does not allow.
var ErrKind = errors.New("wrong tensor kind")

// DecodeTrits fills dst (length Len()) with the trits of a ternary tensor,
// after checking the section's BLAKE3. Errors are *FormatError values
// wrapping ErrHash or ErrInvalidCode; dst is undefined after an error.
func (t *Tensor) DecodeTrits(dst []int8) error {
	if t.Entry.Kind != manifest.KindTernary {
		return fmt.Errorf("%w: tensor %q is %s, not ternary", ErrKind, t.Entry.Name, t.Entry.Kind)
	}
	if len(dst) != t.Len() {
		return fmt.Errorf("decode tensor %q: dst holds %d trits, tensor has %d", t.Entry.Name, len(dst), t.Len())
	}
	p, err := t.VerifiedPayload()
	if err != nil {
		return err
	}
	if err := Codec(t.Entry.Codec).Decode(dst, p); err != nil {
		return t.fail(t.Entry.Section.Offset, err)
	}
	return nil
}

// Scales reads the float32 scales of a ternary tensor at row or group
// granularity, or of an int8 tensor; for a ternary tensor at tensor
// granularity it returns its one scale.
func (t *Tensor) Scales() ([]float32, error) {
	e := t.Entry
	if e.Scales == nil {
		if e.Kind != manifest.KindTernary {
			return nil, fmt.Errorf("%w: tensor %q is %s and has no scales", ErrKind, e.Name, e.Kind)
		}
		return []float32{e.Scale}, nil
	}
	p, err := t.verifiedSection(*e.Scales)
	if err != nil {
		return nil, err
	}
	s := make([]float32, len(p)/4)
	for i := range s {
		s[i] = math.Float32frombits(binary.LittleEndian.Uint32(p[4*i:]))
		// Ternary scales are > 0; int8 scales are ≥ 0 (an all-zero row has 0).
		if v := float64(s[i]); math.IsNaN(v) || math.IsInf(v, 0) || v < 0 || (v == 0 && e.Kind == manifest.KindTernary) {
			return nil, t.fail(e.Scales.Offset+4*int64(i), fmt.Errorf("%w: %s scale %d is %v", ErrInvalidCode, e.Kind, i, s[i]))
		}
	}
	return s, nil
}

// int8Codes checks the verified payload of an int8 tensor: codes are
// -127..127.
func (t *Tensor) int8Codes() ([]byte, error) {
	p, err := t.VerifiedPayload()
	if err != nil {
		return nil, err
	}
	if i := bytes.IndexByte(p, 0x80); i >= 0 {
		return nil, t.fail(t.Entry.Section.Offset+int64(i), fmt.Errorf("%w: int8 code %d is -128 (codes are -127..127)", ErrInvalidCode, i))
	}
	return p, nil
}

// GroupSize is the number of consecutive elements that share one scale.
func (t *Tensor) GroupSize() int {
	g := t.Entry.Granularity
	if g == nil {
		return t.Len()
	}
	size, _ := g.GroupSize(t.Len(), convert.Columns(t.Entry.Shape))
	return size
}

// DecodeFloat32 fills dst (length Len()) with the reconstructed weights:
// scale × trit for a ternary tensor, scale × code for an int8 tensor, the
// stored values of a kept float tensor, after checking the sections'
// BLAKE3.
func (t *Tensor) DecodeFloat32(dst []float32) error {
	e := t.Entry
	if len(dst) != t.Len() {
		return fmt.Errorf("decode tensor %q: dst holds %d values, tensor has %d", e.Name, len(dst), t.Len())
	}
	if e.Kind == manifest.KindKept {
		p, err := t.VerifiedPayload()
		if err != nil {
			return err
		}
		if err := convert.DecodeFloat32(e.DType, p, dst); err != nil {
			return fmt.Errorf("decode tensor %q: %w", e.Name, err)
		}
		return nil
	}
	codes := make([]int8, len(dst))
	if e.Kind == manifest.KindTernary {
		if err := t.DecodeTrits(codes); err != nil {
			return err
		}
	} else {
		p, err := t.int8Codes()
		if err != nil {
			return err
		}
		copy(unsafeInt8Bytes(codes), p)
	}
	scales, err := t.Scales()
	if err != nil {
		return err
	}
	size := t.GroupSize()
	for i, v := range codes {
		dst[i] = scales[i/size] * float32(v)
	}
	return nil
}
