package pack

import (
	"errors"
	"fmt"

	"ternkit/convert"
	"ternkit/manifest"
)

// ErrTritCounts reports decoded trits whose counts differ from the
// manifest's. Typically this indicates a corrupted or forged manifest.
var ErrTritCounts = errors.New("trit counts differ from the manifest")

// Check reads the whole artifact beyond what Open checks: the zero padding
// after every section, every section's BLAKE3, and every ternary payload,
// decoded and counted against the manifest. It returns the first problem
// as a *FormatError wrapping ErrStructure, ErrHash, ErrInvalidCode or
// ErrTritCounts. Memory use is bounded by the largest tensor.
func (a *Artifact) Check() error {
	var trits []int8
	var sections []manifest.Section
	var owners []*manifest.Tensor
	for i := range a.m.Tensors {
		for _, s := range a.m.Tensors[i].Sections() {
			sections = append(sections, s)
			owners = append(owners, &a.m.Tensors[i])
		}
	}
	for i, s := range sections {
		next := a.manifestOff
		if i+1 < len(sections) {
			next = sections[i+1].Offset
		}
		if err := a.checkPadding(s.Offset+s.Length, next); err != nil {
			return err
		}
		e := owners[i]
		t := &Tensor{a: a, Entry: *e}
		if e.Kind != manifest.KindTernary || s.Offset != e.Section.Offset {
			if _, err := t.verifiedSection(s); err != nil {
				return err
			}
			continue
		}
		trits = grow(trits, t.Len())
		if err := t.DecodeTrits(trits); err != nil {
			return err
		}
		var got convert.TritCounts
		got.Count(trits)
		if got != *e.Trits {
			return t.fail(e.Section.Offset, fmt.Errorf("%w: decoded %+v, manifest records %+v", ErrTritCounts, got, *e.Trits))
		}
	}
	if len(sections) == 0 {
		return a.checkPadding(PreambleLen, a.manifestOff)
	}
	return nil
}

// checkPadding requires the bytes in [from, to) to be zero.
func (a *Artifact) checkPadding(from, to int64) error {
	if to <= from {
		return nil
	}
	pad := make([]byte, to-from)
	if _, err := a.r.ReadAt(pad, from); err != nil {
		return &FormatError{File: a.file, Where: "padding", Offset: from, Err: err}
	}
	if i := firstNonZero(pad); i >= 0 {
		return &FormatError{File: a.file, Where: "padding", Offset: from + int64(i), Err: fmt.Errorf("%w: padding byte is 0x%02x", ErrStructure, pad[i])}
	}
	return nil
}
