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
	"time"

	"ternkit/convert"
)

// FormatName and Version identify the manifest layout.
const (
	FormatName = "ternkit-artifact"
	Version    = 1
	// MinorWritten is the minor version new artifacts have (pack/FORMAT.md,
	// "Versioning"); their manifests record it as "minor".
	MinorWritten = 4
)

// Tensor kinds.
const (
	KindTernary = "ternary" // packed trits and scales
	KindKept    = "kept"    // stored bytes of a float, integer or other dtype
	KindInt8    = "int8"    // per-row absmax int8 codes and scales
)

// Codec names.
const (
	CodecBits2   = "bits2"
	CodecBase3   = "base3"
	CodecEntropy = "entropy" // a zstd frame of the base3 payload: variable length
	CodecRaw     = "raw"
)

// CreatedLayout is the form of "created": UTC, whole seconds (RFC 3339).
const CreatedLayout = "2006-01-02T15:04:05Z"

// CreatedAt formats t as "created" records it.
func CreatedAt(t time.Time) string { return t.UTC().Format(CreatedLayout) }

// ErrInvalid reports a manifest that breaks the rules of pack/FORMAT.md.
var ErrInvalid = errors.New("invalid manifest")

// Manifest is the whole record.
type Manifest struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
	// Minor repeats the preamble's minor version (format 1.4 on; nil, left
	// out, before), so that the manifest hash covers it.
	Minor *int   `json:"minor,omitempty"`
	Tool  string `json:"tool"`
	// Created is the build time as CreatedLayout, or "" (the usual case, so
	// that rebuilding gives the same bytes).
	Created string         `json:"created,omitempty"`
	Recipe  convert.Recipe `json:"recipe"`
	Source  Source         `json:"source"`
	// Policy describes which tensors became ternary and which were kept, as
	// the caller's rule strings in order; nil when not recorded.
	Policy  []string `json:"policy,omitempty"`
	Tensors []Tensor `json:"tensors"`
	// Companions are the files carried beside the weights (format 1.3), in
	// section order after the tensors; nil when there are none.
	Companions []Companion `json:"companions,omitempty"`
	Totals     Totals      `json:"totals"`
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

// ChunkSize is the size of the pieces a large section is hashed in, so
// that a verifier streams it with bounded memory and names the first bad
// piece.
const ChunkSize = 1 << 22

// Section locates a payload or scales in the artifact.
type Section struct {
	Offset int64  `json:"offset"`
	Length int64  `json:"length"`
	BLAKE3 string `json:"blake3"`
	// Chunks holds the BLAKE3 of each ChunkSize piece (the last may be
	// shorter) of a section longer than ChunkSize, and is empty otherwise.
	Chunks []string `json:"chunks,omitempty"`
	// PieceCVs (format 1.4, in place of Chunks) holds the BLAKE3 chaining
	// value of each ChunkSize piece's node in the section's own BLAKE3
	// tree (pack/FORMAT.md, "Hashing"), for a section longer than
	// ChunkSize, and is empty otherwise.
	PieceCVs []string `json:"piece_cvs,omitempty"`
}

// NumChunks is how many chunk hashes a section of length n has.
func NumChunks(n int64) int {
	if n <= ChunkSize {
		return 0
	}
	return int((n + ChunkSize - 1) / ChunkSize)
}

// Tensor is one tensor's entry.
type Tensor struct {
	Name        string  `json:"name"`
	Shape       []int64 `json:"shape"`
	SourceDType string  `json:"source_dtype"`
	Kind        string  `json:"kind"`
	// DType is the stored dtype of a kept tensor: the source dtype, or the
	// one a keep:f16/keep:bf16/keep:f32 action converted it to.
	DType string `json:"dtype,omitempty"`
	Codec string `json:"codec"`
	// Granularity of a ternary tensor's scales; "row" for int8.
	Granularity *convert.Granularity `json:"granularity,omitempty"`
	// Scale is the one scale of a ternary tensor at tensor granularity.
	Scale float32 `json:"scale,omitempty"`
	// Scales locates the float32 scales of a ternary tensor at row or group
	// granularity, or of an int8 tensor.
	Scales *Section `json:"scales,omitempty"`
	// Exact marks a ternary tensor whose source already was scale × trit:
	// its reconstruction is lossless.
	Exact   bool    `json:"exact,omitempty"`
	Section Section `json:"section"`
	// SourceBLAKE3 is the BLAKE3 of the tensor's source bytes (formats
	// 1.0 to 1.3); SourceSpan their source span identity, which also
	// depends on their place in the file (format 1.4, pack/FORMAT.md).
	// An entry has exactly one of them.
	SourceBLAKE3 string              `json:"source_blake3,omitempty"`
	SourceSpan   string              `json:"source_span,omitempty"`
	Trits        *convert.TritCounts `json:"trits,omitempty"`
	// Stats compares the source with the reconstruction, for every lossy
	// tensor (ternary, int8, converted kept).
	Stats *convert.Stats `json:"stats,omitempty"`
}

// NumScales is the number of float32 values in the scales section.
func (e *Tensor) NumScales() int {
	if e.Granularity == nil {
		return 0
	}
	n := NumElements(e.Shape)
	if n < 0 || n > math.MaxInt {
		return 0
	}
	return e.Granularity.NumScales(int(n), convert.Columns(e.Shape))
}

// Sections lists the tensor's sections in file order: the payload, then
// the scales if any.
func (e *Tensor) Sections() []Section {
	if e.Scales == nil {
		return []Section{e.Section}
	}
	return []Section{e.Section, *e.Scales}
}

// StoredBytes is the size of the tensor's sections.
func (e *Tensor) StoredBytes() int64 {
	n := e.Section.Length
	if e.Scales != nil {
		n += e.Scales.Length
	}
	return n
}

// Totals sums the tensors. Section bytes include scales sections.
type Totals struct {
	Tensors              int     `json:"tensors"`
	TernaryTensors       int     `json:"ternary_tensors"`
	Int8Tensors          int     `json:"int8_tensors"`
	KeptTensors          int     `json:"kept_tensors"`
	TernaryParams        int64   `json:"ternary_params"`
	Int8Params           int64   `json:"int8_params"`
	KeptParams           int64   `json:"kept_params"`
	SourceBytes          int64   `json:"source_bytes"`
	TernarySectionBytes  int64   `json:"ternary_section_bytes"`
	Int8SectionBytes     int64   `json:"int8_section_bytes"`
	KeptSectionBytes     int64   `json:"kept_section_bytes"`
	BitsPerTernaryWeight float64 `json:"bits_per_ternary_weight"`
}

// NumElements is the product of the shape, or -1 when a dimension is
// negative or the product of the nonzero dimensions overflows int64
// (pack/FORMAT.md: then every partial product, the row length included,
// fits, whatever the order; a shape with a 0 has no element).
func NumElements(shape []int64) int64 {
	n, zero := uint64(1), false
	for _, d := range shape {
		if d < 0 {
			return -1
		}
		if d == 0 {
			zero = true
			continue
		}
		hi, lo := bits.Mul64(n, uint64(d))
		if hi != 0 || lo > math.MaxInt64 {
			return -1
		}
		n = lo
	}
	if zero {
		return 0
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
		switch e.Kind {
		case KindTernary:
			t.TernaryTensors++
			t.TernaryParams += n
			t.TernarySectionBytes += e.StoredBytes()
		case KindInt8:
			t.Int8Tensors++
			t.Int8Params += n
			t.Int8SectionBytes += e.StoredBytes()
		default:
			t.KeptTensors++
			t.KeptParams += n
			t.KeptSectionBytes += e.StoredBytes()
		}
	}
	if t.TernaryParams > 0 {
		t.BitsPerTernaryWeight = 8 * float64(t.TernarySectionBytes) / float64(t.TernaryParams)
	}
	m.Totals = t
}

// MinorKey is the value of "minor" in new manifests.
func MinorKey() *int {
	v := MinorWritten
	return &v
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
	if m.Minor != nil && *m.Minor != MinorWritten {
		return bad("minor %d (format 1.%d is the only one that records it)", *m.Minor, MinorWritten)
	}
	if err := m.Recipe.Validate(); err != nil {
		return bad("recipe: %v", err)
	}
	if m.Created != "" {
		if t, err := time.Parse(CreatedLayout, m.Created); err != nil || CreatedAt(t) != m.Created || t.Year() < 1 {
			return bad("created %q is not a UTC time like %q", m.Created, CreatedLayout)
		}
	}
	if m.Policy != nil && len(m.Policy) == 0 {
		return bad("policy is an empty list (leave it out, or give the rules)")
	}
	for i, rule := range m.Policy {
		if rule == "" {
			return bad("policy rule %d is empty", i)
		}
	}
	for _, f := range m.Source.Files {
		if f.Bytes < 0 {
			return bad("source file %q has %d bytes", f.Name, f.Bytes)
		}
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
	if err := m.validateCompanions(); err != nil {
		return bad("%v", err)
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
	if err := checkSection(e.Section); err != nil {
		return fmt.Errorf("section: %v", err)
	}
	switch {
	case e.SourceBLAKE3 != "" && e.SourceSpan != "":
		return fmt.Errorf("both source_blake3 and source_span (an entry records one)")
	case e.SourceSpan != "":
		if err := checkHash(e.SourceSpan); err != nil {
			return fmt.Errorf("source_span: %v", err)
		}
	default:
		if err := checkHash(e.SourceBLAKE3); err != nil {
			return fmt.Errorf("source_blake3: %v", err)
		}
	}
	if !floatSource[e.SourceDType] && e.Kind != KindKept {
		return fmt.Errorf("%s tensor from source dtype %q (only float dtypes are quantized)", e.Kind, e.SourceDType)
	}
	switch e.Kind {
	case KindTernary:
		return e.validateTernary(n)
	case KindInt8:
		return e.validateInt8(n)
	case KindKept:
		return e.validateKept(n)
	}
	return fmt.Errorf("kind %q (want %q, %q or %q)", e.Kind, KindTernary, KindInt8, KindKept)
}

func (e *Tensor) validateTernary(n int64) error {
	lo, hi, ok := TritPayloadRange(e.Codec, n)
	switch {
	case !ok:
		return fmt.Errorf("codec %q is not a trit codec", e.Codec)
	case (e.Section.Length < lo || e.Section.Length > hi) && lo == hi:
		return fmt.Errorf("section length %d, codec %s needs %d for %d trits", e.Section.Length, e.Codec, lo, n)
	case e.Section.Length < lo || e.Section.Length > hi:
		return fmt.Errorf("section length %d, codec %s takes %d to %d bytes for %d trits", e.Section.Length, e.Codec, lo, hi, n)
	case e.DType != "":
		return fmt.Errorf("ternary tensor with dtype %q", e.DType)
	case e.Trits == nil || e.Trits.Neg < 0 || e.Trits.Zero < 0 || e.Trits.Pos < 0 || e.Trits.Total() != n:
		return fmt.Errorf("trit counts %+v do not sum to %d", e.Trits, n)
	case e.Stats == nil:
		return errors.New("missing stats")
	}
	if err := e.validateGranularity(); err != nil {
		return err
	}
	if e.Granularity.Kind == convert.GranTensor {
		if e.Scales != nil {
			return errors.New("tensor granularity with a scales section")
		}
		if !(e.Scale > 0) || math.IsInf(float64(e.Scale), 0) {
			return fmt.Errorf("scale %v is not a positive finite number", e.Scale)
		}
		return nil
	}
	if e.Scale != 0 {
		return fmt.Errorf("granularity %s with a single scale %v", e.Granularity, e.Scale)
	}
	return e.validateScales()
}

func (e *Tensor) validateInt8(n int64) error {
	switch {
	case e.Codec != CodecRaw:
		return fmt.Errorf("int8 tensor with codec %q (want %q)", e.Codec, CodecRaw)
	case e.Section.Length != n:
		return fmt.Errorf("section length %d, %d int8 codes need %d", e.Section.Length, n, n)
	case e.Granularity == nil || e.Granularity.Kind != convert.GranRow:
		return fmt.Errorf("int8 tensor with granularity %v (want row)", e.Granularity)
	case e.DType != "" || e.Scale != 0 || e.Trits != nil || e.Exact:
		return errors.New("int8 tensor carries kept or ternary fields")
	case e.Stats == nil:
		return errors.New("missing stats")
	}
	if err := e.validateGranularity(); err != nil {
		return err
	}
	return e.validateScales()
}

func (e *Tensor) validateKept(n int64) error {
	if e.Codec != CodecRaw {
		return fmt.Errorf("kept tensor with codec %q (want %q)", e.Codec, CodecRaw)
	}
	if e.DType == "" {
		return errors.New("kept tensor without dtype")
	}
	if e.Scale != 0 || e.Trits != nil || e.Granularity != nil || e.Scales != nil || e.Exact {
		return errors.New("kept tensor carries ternary fields")
	}
	size, ok := convert.DTypeSize(e.DType)
	if !ok && e.DType != e.SourceDType {
		return fmt.Errorf("unknown dtype %q", e.DType)
	}
	if (e.Stats != nil) != (e.DType != e.SourceDType) {
		return fmt.Errorf("kept tensor stored as %s from %s: stats are required exactly when the dtype changes", e.DType, e.SourceDType)
	}
	if e.DType != e.SourceDType && (!convertedTo[e.DType] || !floatSource[e.SourceDType]) {
		return fmt.Errorf("kept tensor converted from %q to %q (a float dtype converts to F16, BF16 or F32 only)", e.SourceDType, e.DType)
	}
	if !ok {
		// An unknown dtype is kept byte for byte, as the source's data
		// offsets delimit it: only an empty shape has no bytes.
		if (n == 0) != (e.Section.Length == 0) {
			return fmt.Errorf("section length %d for %d elements of dtype %q", e.Section.Length, n, e.DType)
		}
		return nil
	}
	if hi, lo := bits.Mul64(uint64(n), uint64(size)); hi != 0 || lo != uint64(e.Section.Length) {
		return fmt.Errorf("section length %d, %d %s elements need %d", e.Section.Length, n, e.DType, n*int64(size))
	}
	return nil
}

// The dtype conversions a kept tensor may have had (pack/FORMAT.md).
var (
	convertedTo = map[string]bool{"F16": true, "BF16": true, "F32": true}
	floatSource = map[string]bool{"F64": true, "F32": true, "F16": true, "BF16": true, "F8_E4M3": true, "F8_E5M2": true}
)

func (e *Tensor) validateGranularity() error {
	if e.Granularity == nil {
		return errors.New("missing granularity")
	}
	if len(e.Shape) < 2 {
		return fmt.Errorf("%s tensor of shape %v needs 2 or more dimensions", e.Kind, e.Shape)
	}
	n := NumElements(e.Shape)
	if n > math.MaxInt {
		return fmt.Errorf("shape %v too large", e.Shape)
	}
	if _, err := e.Granularity.GroupSize(int(n), convert.Columns(e.Shape)); err != nil {
		return err
	}
	return nil
}

func (e *Tensor) validateScales() error {
	if e.Scales == nil {
		return fmt.Errorf("granularity %s without a scales section", e.Granularity)
	}
	if err := checkSection(*e.Scales); err != nil {
		return fmt.Errorf("scales: %v", err)
	}
	if want := 4 * int64(e.NumScales()); e.Scales.Length != want {
		return fmt.Errorf("scales length %d, %d float32 scales need %d", e.Scales.Length, e.NumScales(), want)
	}
	return nil
}

func checkSection(s Section) error {
	if s.Offset < 0 || s.Length < 0 {
		return fmt.Errorf("offset %d length %d", s.Offset, s.Length)
	}
	want := NumChunks(s.Length)
	switch {
	case len(s.Chunks) > 0 && len(s.PieceCVs) > 0:
		return fmt.Errorf("both chunks and piece_cvs (a section records one of them)")
	case len(s.PieceCVs) > 0 && len(s.PieceCVs) != want:
		return fmt.Errorf("%d piece chaining values for %d bytes (want %d)", len(s.PieceCVs), s.Length, want)
	case len(s.PieceCVs) == 0 && len(s.Chunks) != want:
		return fmt.Errorf("%d chunk hashes for %d bytes (want %d)", len(s.Chunks), s.Length, want)
	}
	for _, h := range s.Chunks {
		if err := checkHash(h); err != nil {
			return fmt.Errorf("chunk: %v", err)
		}
	}
	for _, h := range s.PieceCVs {
		if err := checkHash(h); err != nil {
			return fmt.Errorf("piece_cvs: %v", err)
		}
	}
	return checkHash(s.BLAKE3)
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

// entropyBlockMinLen is the fewest bytes a block holding content takes: a
// 3-byte header and at least one byte (an RLE block's byte, a raw block's
// content, a compressed block's literals section header, RFC 8878
// section 3.1.1.3.1). A frame holding b content bytes in blocks of at most
// EntropyBlockMax has at least ⌈b/EntropyBlockMax⌉ such blocks, so it is
// at least 6 + 4·⌈b/EntropyBlockMax⌉ bytes long: b is at most 32768 times
// the frame's length, whatever the frame claims.
const entropyBlockMinLen = 4

// TritPayloadRange is the smallest and largest payload length of n trits
// in a trit codec: the same for bits2 and base3; for entropy, at least the
// shortest frame that can hold the base3 payload (magic, descriptor, a
// 1-byte content size, and a 4-byte block per 128 KiB of content) and at
// most the size of a frame holding it in stored blocks.
func TritPayloadRange(codec string, n int64) (lo, hi int64, ok bool) {
	if l, ok := TritPayloadLen(codec, n); ok {
		return l, l, true
	}
	if codec != CodecEntropy {
		return 0, 0, false
	}
	b := (n + 4) / 5
	blocks := max(1, (b+EntropyBlockMax-1)/EntropyBlockMax)
	lo = EntropyMinLen
	if b > 0 {
		lo = max(lo, 4+1+1+entropyBlockMinLen*blocks)
	}
	return lo, entropyHeadMax + 3*blocks + b, true
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
