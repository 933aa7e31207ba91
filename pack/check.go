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
// after every section, every section's BLAKE3 and chunk hashes, every
// ternary payload, decoded and counted against the manifest, every int8
// code and every scale in a scales section. It returns the first problem
// as a *FormatError wrapping ErrStructure, ErrHash, ErrInvalidCode or
// ErrTritCounts. Memory use is bounded by the largest tensor.
func (a *Artifact) Check() error {
	type placed struct {
		s      manifest.Section
		owner  *manifest.Tensor
		scales bool // the tensor's scales section, not its payload
	}
	var sections []placed
	for i := range a.m.Tensors {
		for k, s := range a.m.Tensors[i].Sections() {
			sections = append(sections, placed{s, &a.m.Tensors[i], k == 1})
		}
	}
	var trits []int8
	for i, p := range sections {
		next := a.manifestOff
		if len(a.m.Companions) > 0 {
			next = a.m.Companions[0].Section.Offset
		}
		if i+1 < len(sections) {
			next = sections[i+1].s.Offset
		}
		if err := a.checkPadding(p.s.Offset+p.s.Length, next); err != nil {
			return err
		}
		e := p.owner
		t := &Tensor{a: a, Entry: *e}
		var err error
		switch {
		case p.scales:
			_, err = t.Scales()
		case e.Kind == manifest.KindInt8:
			_, err = t.int8Codes()
		case e.Kind == manifest.KindTernary:
			trits = grow(trits, t.Len())
			err = t.checkTrits(trits)
		default:
			_, err = t.verifiedSection(p.s)
		}
		if err != nil {
			return err
		}
	}
	end := int64(PreambleLen)
	if len(sections) > 0 {
		last := sections[len(sections)-1].s
		end = last.Offset + last.Length
	}
	for i := range a.m.Companions {
		c := &a.m.Companions[i]
		if err := a.checkPadding(end, c.Section.Offset); err != nil {
			return err
		}
		if _, err := a.verifiedCompanion(c); err != nil {
			return err
		}
		end = c.Section.Offset + c.Section.Length
	}
	if len(sections) == 0 || len(a.m.Companions) > 0 {
		return a.checkPadding(end, a.manifestOff)
	}
	return nil
}

// checkTrits decodes the tensor's trits into buf and counts them against
// the manifest.
func (t *Tensor) checkTrits(buf []int8) error {
	if err := t.DecodeTrits(buf); err != nil {
		return err
	}
	var got convert.TritCounts
	got.Count(buf)
	if got != *t.Entry.Trits {
		return t.fail(t.Entry.Section.Offset, fmt.Errorf("%w: decoded %+v, manifest records %+v", ErrTritCounts, got, *t.Entry.Trits))
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
