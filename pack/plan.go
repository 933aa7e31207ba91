package pack

import (
	"encoding/json"
	"errors"
	"fmt"
	"strings"

	"ternkit/convert"
	"ternkit/manifest"
)

// Planned is what Build writes into a tensor's manifest entry before
// reading its bytes: everything that follows from the source's header and
// the policy. The codec (auto picks per tensor), the hashes, the scales and
// the statistics come from the bytes.
type Planned struct {
	Name        string
	Shape       []int64
	SourceDType string
	Kind        string               // manifest.KindTernary, KindInt8 or KindKept
	DType       string               // stored dtype of a kept tensor, else ""
	Granularity *convert.Granularity // ternary and int8 tensors, else nil
}

// Plan returns the entry Build writes for tensor t under action a.
func Plan(t *convert.Tensor, a convert.Action) Planned {
	p := Planned{Name: t.Name, Shape: t.Shape, SourceDType: t.DType}
	switch {
	case keptAsIs(a, t):
		p.Kind, p.DType = manifest.KindKept, t.DType
	case a.Kind == convert.ActTernary:
		g := a.Granularity
		p.Kind, p.Granularity = manifest.KindTernary, &g
	case a.Kind == convert.ActInt8:
		p.Kind, p.Granularity = manifest.KindInt8, &convert.Granularity{Kind: convert.GranRow}
	default:
		p.Kind, p.DType = manifest.KindKept, a.KeptDType(t.DType)
	}
	return p
}

// PlanOf is the planned part of a manifest entry.
func PlanOf(e *manifest.Tensor) Planned {
	return Planned{Name: e.Name, Shape: e.Shape, SourceDType: e.SourceDType, Kind: e.Kind, DType: e.DType, Granularity: e.Granularity}
}

// ErrManifestTooLarge reports a checkpoint whose manifest would exceed
// DefaultMaxManifest, the length every reader accepts by default: such an
// artifact could be written but not read.
var ErrManifestTooLarge = errors.New("manifest would exceed the reader's limit")

// writeMaxManifest is the longest manifest Build writes (a variable for
// tests).
var writeMaxManifest int64 = DefaultMaxManifest

// placeholderHash stands for a BLAKE3 in a manifest estimate: every hash
// takes 64 hex digits.
var placeholderHash = strings.Repeat("0", 64)

// manifestLowerBound is a length the manifest of src under actions cannot
// be shorter than: each tensor's planned entry with its hashes and section,
// without statistics, trit counts or scale, at offset 0.
func manifestLowerBound(src *convert.Source, actions map[*convert.Tensor]convert.Action) (int64, error) {
	var n int64
	for _, t := range src.Tensors {
		p := Plan(t, actions[t])
		e := manifest.Tensor{Name: p.Name, Shape: p.Shape, SourceDType: p.SourceDType, Kind: p.Kind, DType: p.DType,
			Granularity: p.Granularity, Codec: manifest.CodecRaw, SourceSpan: placeholderHash,
			Section: manifest.Section{BLAKE3: placeholderHash}}
		b, err := json.Marshal(&e)
		if err != nil {
			return 0, err
		}
		n += int64(len(b)) + 1 // and a comma
	}
	return n, nil
}

// checkManifestSize refuses, before anything is written, a source whose
// manifest would pass the reader's limit.
func checkManifestSize(src *convert.Source, actions map[*convert.Tensor]convert.Action) error {
	n, err := manifestLowerBound(src, actions)
	if err != nil {
		return err
	}
	if n > writeMaxManifest {
		return &convert.InputError{File: src.Path, Offset: -1, Err: fmt.Errorf("%w: the entries of its %d tensors take at least %d bytes, over %d",
			ErrManifestTooLarge, len(src.Tensors), n, writeMaxManifest)}
	}
	return nil
}
