package pack

import (
	"fmt"
	"maps"
	"slices"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
)

// UnpackedFromKey is the metadata key under which Unpack records the
// manifest BLAKE3 of the artifact it read.
const UnpackedFromKey = "ternkit.unpacked_from"

// UnpackDTypes are the float dtypes Unpack writes.
var UnpackDTypes = []string{"F32", "F16", "BF16"}

// SourceDType, given to Unpack as the dtype, writes each float tensor in
// its source dtype (F32 when that is not one of UnpackDTypes).
const SourceDType = ""

// Unpack writes the artifact's tensors to a safetensors file at dst, with
// the same names, shapes and order: ternary tensors as scale × trit, kept
// float tensors converted to dtype (their bytes unchanged when their stored
// dtype is dtype; dtype SourceDType means each tensor's source dtype), other kept tensors byte for byte in their own dtype. The
// metadata is the source's, plus UnpackedFromKey. Each section's hash is
// checked as it is read. The write is atomic: on error nothing is left at
// dst. Memory holds one tensor at a time.
func Unpack(a *Artifact, dst, dtype string) error {
	if dtype != SourceDType && !slices.Contains(UnpackDTypes, dtype) {
		return fmt.Errorf("%w: unpack to %q (valid: %v)", convert.ErrDType, dtype, UnpackDTypes)
	}
	return unpackTensors(a, dst, dtype, a.Manifest().Tensors)
}

// unpackTensors writes the given tensors of the artifact, in order, to a
// safetensors file at dst, as Unpack describes.
func unpackTensors(a *Artifact, dst, dtype string, tensors []manifest.Tensor) error {
	m := a.Manifest()
	layout := make([]convert.WriteTensor, len(tensors))
	for i, e := range tensors {
		layout[i] = convert.WriteTensor{Name: e.Name, DType: unpackedDType(e, dtype), Shape: e.Shape}
	}
	meta := maps.Clone(m.Source.Metadata)
	if meta == nil {
		meta = map[string]string{}
	}
	meta[UnpackedFromKey] = manifest.HexHash(a.ManifestHash())
	w, err := convert.CreateFile(dst, layout, meta)
	if err != nil {
		return err
	}
	defer w.Abort()
	var (
		floats []float32
		out    []byte
	)
	for i, e := range tensors {
		t := &Tensor{a: a, Entry: e}
		p, err := t.Payload()
		if err != nil {
			return err
		}
		if got := manifest.HexHash(blake3.Sum256(p)); got != e.Section.BLAKE3 {
			return t.fail(e.Section.Offset, fmt.Errorf("%w: section BLAKE3 %s, manifest records %s", ErrHash, got, e.Section.BLAKE3))
		}
		if e.Scales != nil {
			sp := make([]byte, e.Scales.Length)
			if _, err := a.r.ReadAt(sp, e.Scales.Offset); err != nil {
				return t.fail(e.Scales.Offset, err)
			}
			if got := manifest.HexHash(blake3.Sum256(sp)); got != e.Scales.BLAKE3 {
				return t.fail(e.Scales.Offset, fmt.Errorf("%w: scales BLAKE3 %s, manifest records %s", ErrHash, got, e.Scales.BLAKE3))
			}
		}
		if layout[i].DType == e.DType && e.Kind == manifest.KindKept {
			if err := w.WriteTensor(p); err != nil {
				return err
			}
			continue
		}
		floats = grow(floats, t.Len())
		if err := t.DecodeFloat32(floats); err != nil {
			return err
		}
		if out, err = convert.EncodeFloat32(out[:0], layout[i].DType, floats); err != nil {
			return fmt.Errorf("unpack tensor %q: %w", e.Name, err)
		}
		if err := w.WriteTensor(out); err != nil {
			return err
		}
	}
	return w.Commit()
}

// unpackedDType is the dtype a tensor gets in the unpacked file: dtype,
// except for kept tensors that are not floats (integers, BOOL, unknown),
// which keep their stored dtype.
func unpackedDType(e manifest.Tensor, dtype string) string {
	if e.Kind == manifest.KindKept && !(&convert.Tensor{DType: e.DType}).IsFloat() {
		return e.DType
	}
	if dtype == SourceDType {
		if slices.Contains(UnpackDTypes, e.SourceDType) {
			return e.SourceDType
		}
		return "F32"
	}
	return dtype
}
