// Package manifest is the record stored in a ternkit artifact: provenance,
// recipe, per-tensor layout, hashes and statistics. Its JSON form is
// specified in pack/FORMAT.md.
package manifest

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/bits"
	"reflect"

	"ternkit/convert"
)

// FormatName and Version identify the manifest layout.
const (
	FormatName = "ternkit-artifact"
	Version    = 1
)

// Tensor kinds.
const (
	KindTernary = "ternary"
	KindKept    = "kept"
)

// Codec names.
const (
	CodecBits2   = "bits2"
	CodecBase3   = "base3"
	CodecEntropy = "entropy" // a zstd frame of the base3 payload: variable length
	CodecRaw     = "raw"
)

// ErrInvalid reports a manifest that breaks the rules of pack/FORMAT.md.
var ErrInvalid = errors.New("invalid manifest")

// Manifest is the whole record.
type Manifest struct {
	Format  string         `json:"format"`
	Version int            `json:"version"`
	Tool    string         `json:"tool"`
	Recipe  convert.Recipe `json:"recipe"`
	Source  Source         `json:"source"`
	Tensors []Tensor       `json:"tensors"`
	Totals  Totals         `json:"totals"`
}

// Source is the provenance of the artifact.
type Source struct {
	Files    []SourceFile      `json:"files"`
	Metadata map[string]string `json:"metadata,omitempty"`
}

// SourceFile is one file of the source checkpoint.
type SourceFile struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	BLAKE3 string `json:"blake3"`
}

// Section locates a tensor's payload in the artifact.
type Section struct {
	Offset int64  `json:"offset"`
	Length int64  `json:"length"`
	BLAKE3 string `json:"blake3"`
}

// Tensor is one tensor's entry.
type Tensor struct {
	Name         string              `json:"name"`
	Shape        []int64             `json:"shape"`
	SourceDType  string              `json:"source_dtype"`
	Kind         string              `json:"kind"`
	Codec        string              `json:"codec"`
	Scale        float32             `json:"scale,omitempty"`
	Section      Section             `json:"section"`
	SourceBLAKE3 string              `json:"source_blake3"`
	Trits        *convert.TritCounts `json:"trits,omitempty"`
	RelRMSE      *float64            `json:"rel_rmse,omitempty"`
	MaxAbsErr    *float64            `json:"max_abs_err,omitempty"`
}

// Totals sums the tensors.
type Totals struct {
	Tensors              int     `json:"tensors"`
	TernaryTensors       int     `json:"ternary_tensors"`
	KeptTensors          int     `json:"kept_tensors"`
	TernaryParams        int64   `json:"ternary_params"`
	KeptParams           int64   `json:"kept_params"`
	SourceBytes          int64   `json:"source_bytes"`
	TernarySectionBytes  int64   `json:"ternary_section_bytes"`
	KeptSectionBytes     int64   `json:"kept_section_bytes"`
	BitsPerTernaryWeight float64 `json:"bits_per_ternary_weight"`
}

// NumElements is the product of the shape, or -1 when it overflows int64
// or a dimension is negative.
func NumElements(shape []int64) int64 {
	n := uint64(1)
	for _, d := range shape {
		if d < 0 {
			return -1
		}
		hi, lo := bits.Mul64(n, uint64(d))
		if hi != 0 || lo > math.MaxInt64 {
			return -1
		}
		n = lo
	}
	return int64(n)
}

// ComputeTotals fills m.Totals from m.Tensors and m.Source.
func (m *Manifest) ComputeTotals() {
	var t Totals
	for _, f := range m.Source.Files {
		t.SourceBytes += f.Bytes
	}
	for i := range m.Tensors {
		e := &m.Tensors[i]
		t.Tensors++
		n := NumElements(e.Shape)
		if e.Kind == KindTernary {
			t.TernaryTensors++
			t.TernaryParams += n
			t.TernarySectionBytes += e.Section.Length
		} else {
			t.KeptTensors++
			t.KeptParams += n
			t.KeptSectionBytes += e.Section.Length
		}
	}
	if t.TernaryParams > 0 {
		t.BitsPerTernaryWeight = 8 * float64(t.TernarySectionBytes) / float64(t.TernaryParams)
	}
	m.Totals = t
}

// Encode writes m as compact JSON.
func Encode(m *Manifest) ([]byte, error) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(m); err != nil {
		return nil, fmt.Errorf("encode manifest: %w", err)
	}
	return bytes.TrimSuffix(buf.Bytes(), []byte("\n")), nil
}

// Decode parses and validates a manifest. Unknown, repeated and
// case-mismatched keys are rejected.
func Decode(b []byte) (*Manifest, error) {
	if err := checkStrictJSON(b, reflect.TypeFor[Manifest]()); err != nil {
		return nil, err
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	var m Manifest
	if err := dec.Decode(&m); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrInvalid, err)
	}
	if dec.More() {
		return nil, fmt.Errorf("%w: data after the JSON object", ErrInvalid)
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	return &m, nil
}

// Validate checks the manifest's own rules (pack/FORMAT.md, "Manifest");
// the section layout against the file is checked by the reader.
func (m *Manifest) Validate() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s", ErrInvalid, fmt.Sprintf(format, args...))
	}
	if m.Format != FormatName {
		return bad("format %q (want %q)", m.Format, FormatName)
	}
	if m.Version != Version {
		return bad("version %d (want %d)", m.Version, Version)
	}
	if err := m.Recipe.Validate(); err != nil {
		return bad("recipe: %v", err)
	}
	for _, f := range m.Source.Files {
		if err := checkHash(f.BLAKE3); err != nil {
			return bad("source file %q: %v", f.Name, err)
		}
	}
	seen := make(map[string]bool, len(m.Tensors))
	for i := range m.Tensors {
		e := &m.Tensors[i]
		if e.Name == "" {
			return bad("tensor %d has an empty name", i)
		}
		if seen[e.Name] {
			return bad("duplicate tensor name %q", e.Name)
		}
		seen[e.Name] = true
		if err := e.validate(); err != nil {
			return bad("tensor %q: %v", e.Name, err)
		}
	}
	want := *m
	want.ComputeTotals()
	got := m.Totals
	got.BitsPerTernaryWeight = want.Totals.BitsPerTernaryWeight
	if got != want.Totals {
		return bad("totals %+v do not match the tensors (want %+v)", m.Totals, want.Totals)
	}
	return nil
}

func (e *Tensor) validate() error {
	n := NumElements(e.Shape)
	if n < 0 {
		return fmt.Errorf("shape %v is negative or overflows", e.Shape)
	}
	if err := checkHash(e.Section.BLAKE3); err != nil {
		return fmt.Errorf("section: %v", err)
	}
	if err := checkHash(e.SourceBLAKE3); err != nil {
		return fmt.Errorf("source_blake3: %v", err)
	}
	if e.Section.Offset < 0 || e.Section.Length < 0 {
		return fmt.Errorf("section offset %d length %d", e.Section.Offset, e.Section.Length)
	}
	switch e.Kind {
	case KindTernary:
		lo, hi, ok := TritPayloadRange(e.Codec, n)
		if !ok {
			return fmt.Errorf("codec %q is not a trit codec", e.Codec)
		}
		if e.Section.Length < lo || e.Section.Length > hi {
			if lo == hi {
				return fmt.Errorf("section length %d, codec %s needs %d for %d trits", e.Section.Length, e.Codec, lo, n)
			}
			return fmt.Errorf("section length %d, codec %s takes %d to %d bytes for %d trits", e.Section.Length, e.Codec, lo, hi, n)
		}
		if !(e.Scale > 0) || math.IsInf(float64(e.Scale), 0) {
			return fmt.Errorf("scale %v is not a positive finite number", e.Scale)
		}
		if e.Trits == nil || e.Trits.Neg < 0 || e.Trits.Zero < 0 || e.Trits.Pos < 0 || e.Trits.Total() != n {
			return fmt.Errorf("trit counts %+v do not sum to %d", e.Trits, n)
		}
		if e.RelRMSE == nil || e.MaxAbsErr == nil {
			return errors.New("missing rel_rmse or max_abs_err")
		}
	case KindKept:
		if e.Codec != CodecRaw {
			return fmt.Errorf("kept tensor with codec %q (want %q)", e.Codec, CodecRaw)
		}
		size, ok := convert.DTypeSize(e.SourceDType)
		if !ok {
			return fmt.Errorf("unknown source dtype %q", e.SourceDType)
		}
		if hi, lo := bits.Mul64(uint64(n), uint64(size)); hi != 0 || lo != uint64(e.Section.Length) {
			return fmt.Errorf("section length %d, %d %s elements need %d", e.Section.Length, n, e.SourceDType, n*int64(size))
		}
		if e.Scale != 0 || e.Trits != nil || e.RelRMSE != nil || e.MaxAbsErr != nil {
			return errors.New("kept tensor carries ternary fields")
		}
	default:
		return fmt.Errorf("kind %q (want %q or %q)", e.Kind, KindTernary, KindKept)
	}
	return nil
}

// TritPayloadLen is the payload length of n trits in a fixed-length trit
// codec (bits2, base3).
func TritPayloadLen(codec string, n int64) (int64, bool) {
	switch codec {
	case CodecBits2:
		return (n + 3) / 4, true
	case CodecBase3:
		return (n + 4) / 5, true
	}
	return 0, false
}

// Bounds of an entropy payload (pack/FORMAT.md, "entropy"): one frame
// with a 4-byte magic, a 1-byte descriptor, a 1- to 8-byte content size
// and blocks of at most EntropyBlockMax content bytes, each behind a 3-byte
// header.
const (
	EntropyMinLen   = 9 // magic, descriptor, 1-byte content size, one empty block
	EntropyBlockMax = 128 << 10
	entropyHeadMax  = 4 + 1 + 8
)

// TritPayloadRange is the smallest and largest payload length of n trits
// in a trit codec: the same for bits2 and base3; for entropy, at most the
// size of a frame holding the base3 payload in stored blocks.
func TritPayloadRange(codec string, n int64) (lo, hi int64, ok bool) {
	if l, ok := TritPayloadLen(codec, n); ok {
		return l, l, true
	}
	if codec != CodecEntropy {
		return 0, 0, false
	}
	b := (n + 4) / 5
	blocks := max(1, (b+EntropyBlockMax-1)/EntropyBlockMax)
	return EntropyMinLen, entropyHeadMax + 3*blocks + b, true
}

// HexHash formats a BLAKE3 sum as the manifest writes it.
func HexHash(sum [32]byte) string { return hex.EncodeToString(sum[:]) }

func checkHash(s string) error {
	if len(s) != 64 {
		return fmt.Errorf("hash %q is not 64 hex digits", s)
	}
	for _, c := range s {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return fmt.Errorf("hash %q is not lowercase hex", s)
		}
	}
	return nil
}
