// Package diff compares two ternkit artifacts, typically two releases of a
// model: what changed in their provenance, which tensors were added,
// removed or reshaped, and for each common tensor its kind, codec, scales,
// statistics, section bytes and, when asked, its trits.
//
// Sections are compared by the BLAKE3 of the bytes read from each file,
// not by the hashes the manifests record, so a byte changed after packing
// shows; a section that does not match its own manifest's record is listed
// as a mismatch. diff does not otherwise verify the artifacts.
package diff

import (
	"encoding/binary"
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strings"

	"github.com/zeebo/blake3"

	"ternkit/manifest"
	"ternkit/pack"
)

// Options choose how deep Compare looks.
type Options struct {
	// Trits decodes the trits of common ternary tensors whose section
	// bytes or codec differ and counts the positions that differ. Without
	// it, trits are not decoded and only section bytes are compared.
	Trits bool
}

// Change is one provenance field that differs. For the policy, the rules
// only one side has are listed too (the rest moved).
type Change struct {
	Field        string   `json:"field"`
	A            string   `json:"a"`
	B            string   `json:"b"`
	RulesAdded   []string `json:"rules_added,omitempty"`
	RulesRemoved []string `json:"rules_removed,omitempty"`
}

// Tensor is a tensor present in one artifact only.
type Tensor struct {
	Name  string  `json:"name"`
	Shape []int64 `json:"shape"`
	Kind  string  `json:"kind"`
	Codec string  `json:"codec"`
	Bytes int64   `json:"bytes"`
}

// Reshape is a tensor whose shape differs.
type Reshape struct {
	Name   string  `json:"name"`
	ShapeA []int64 `json:"shape_a"`
	ShapeB []int64 `json:"shape_b"`
}

// Mismatch is a section whose bytes do not match the BLAKE3 its own
// manifest records: the artifact is corrupt (verify says where).
type Mismatch struct {
	Artifact string `json:"artifact"` // "a" or "b"
	Tensor   string `json:"tensor"`
	Section  string `json:"section"` // "payload" or "scales"
	Recorded string `json:"recorded_blake3"`
	Actual   string `json:"actual_blake3"`
}

// Aspects of a common tensor that can change, as TensorChange.Changed
// lists them.
const (
	AspectKind   = "kind"
	AspectCodec  = "codec"
	AspectDType  = "source_dtype"
	AspectStored = "dtype"       // the stored dtype of a kept tensor
	AspectGran   = "granularity" // tensor, row or group:N
	AspectScale  = "scale"       // the one scale, or any of the scales section
	AspectTrits  = "trits"       // decoded trits differ (Options.Trits)
	AspectStats  = "stats"       // rel_rmse, cosine or zero fraction
	AspectBytes  = "bytes"
	AspectSource = "source" // the source tensor's bytes (source_blake3), or bytes or place (source_span)
	AspectData   = "data"   // the section's bytes, when nothing above explains it
)

// TensorChange is a tensor present in both artifacts, with the same shape,
// that differs in at least one aspect.
type TensorChange struct {
	Name    string   `json:"name"`
	Changed []string `json:"changed"`
	KindA   string   `json:"kind_a"`
	KindB   string   `json:"kind_b"`
	CodecA  string   `json:"codec_a"`
	CodecB  string   `json:"codec_b"`
	DTypeA  string   `json:"dtype_a,omitempty"` // stored dtype of a kept tensor
	DTypeB  string   `json:"dtype_b,omitempty"`
	GranA   string   `json:"granularity_a,omitempty"`
	GranB   string   `json:"granularity_b,omitempty"`
	ScaleA  float32  `json:"scale_a,omitempty"` // the one scale of a tensor-granularity ternary tensor
	ScaleB  float32  `json:"scale_b,omitempty"`
	// ScaleDrift is the largest relative change of a scale, |b − a| / a,
	// over all scales, when both store the same number of scales of the
	// same kind; absent otherwise.
	ScaleDrift *float64 `json:"scale_drift,omitempty"`
	// Statistics against the source, when both have them.
	RelRMSEA *float64 `json:"rel_rmse_a,omitempty"`
	RelRMSEB *float64 `json:"rel_rmse_b,omitempty"`
	CosineA  *float64 `json:"cosine_a,omitempty"`
	CosineB  *float64 `json:"cosine_b,omitempty"`
	ZeroA    *float64 `json:"zero_fraction_a,omitempty"`
	ZeroB    *float64 `json:"zero_fraction_b,omitempty"`
	// SectionsDiffer is true when the section bytes read differ.
	SectionsDiffer bool `json:"sections_differ"`
	// TritsCompared is the element count when both are ternary and trits
	// were compared (Options.Trits), else 0.
	TritsCompared int64   `json:"trits_compared"`
	TritsDiffer   int64   `json:"trits_differ"`
	TritsFraction float64 `json:"trits_differ_fraction"`
	BytesA        int64   `json:"bytes_a"`
	BytesB        int64   `json:"bytes_b"`
}

// Totals sums the comparison.
type Totals struct {
	TensorsA       int     `json:"tensors_a"`
	TensorsB       int     `json:"tensors_b"`
	Added          int     `json:"added"`
	Removed        int     `json:"removed"`
	Reshaped       int     `json:"reshaped"`
	Changed        int     `json:"changed"`
	Unchanged      int     `json:"unchanged"`
	BytesA         int64   `json:"bytes_a"` // artifact sizes
	BytesB         int64   `json:"bytes_b"`
	SectionsDiffer int     `json:"sections_differ"` // common tensors whose section bytes differ
	TritsCompared  int64   `json:"trits_compared"`
	TritsDiffer    int64   `json:"trits_differ"`
	TritsFraction  float64 `json:"trits_differ_fraction"`
	Mismatches     int     `json:"mismatches"`
}

// Compared says what a report compared, in words and flags.
type Compared struct {
	Sections bool `json:"sections"` // always: BLAKE3 of the section bytes as read
	Trits    bool `json:"trits"`    // trits decoded where sections differ
	// Source is how the source tensors were compared: SourceSpan or
	// SourceBLAKE3 when both artifacts record that kind, SourceNone when
	// they record different kinds and the sources are not compared.
	Source  string `json:"source"`
	Summary string `json:"summary"`
}

// How a report compared the source tensors (Compared.Source).
const (
	SourceSpan   = "source_span"   // span identities: bytes and place in the file (format 1.4)
	SourceBLAKE3 = "source_blake3" // BLAKE3 of the bytes (formats 1.0 to 1.3)
	SourceNone   = "none"          // the artifacts record different kinds
)

// sourceKind is the kind of source identity a manifest records.
func sourceKind(m *manifest.Manifest) string {
	for _, e := range m.Tensors {
		if e.SourceSpan != "" {
			return SourceSpan
		}
	}
	return SourceBLAKE3
}

// sourceCompared fills how the source tensors of ma and mb are compared.
func (c *Compared) sourceCompared(ma, mb *manifest.Manifest) {
	ka, kb := sourceKind(ma), sourceKind(mb)
	switch {
	case ka != kb:
		c.Source = SourceNone
		c.Summary += fmt.Sprintf("; source tensors not compared: A records %s, B %s (different kinds of identity)", ka, kb)
	case ka == SourceSpan:
		c.Source = ka
		c.Summary += "; source tensors by their span identity (their bytes and their place in the source file)"
	default:
		c.Source = ka
		c.Summary += "; source tensors by the BLAKE3 of their bytes"
	}
}

// Report is the comparison of artifact A (the older) with B.
type Report struct {
	A          string         `json:"a"`
	B          string         `json:"b"`
	Compared   Compared       `json:"compared"`
	Provenance []Change       `json:"provenance"`
	Added      []Tensor       `json:"added"`
	Removed    []Tensor       `json:"removed"`
	Reshaped   []Reshape      `json:"reshaped"`
	Changed    []TensorChange `json:"changed"`
	// Companions are the companion files added, removed or changed.
	Companions []CompanionChange `json:"companions"`
	Mismatches []Mismatch        `json:"mismatches"`
	Totals     Totals            `json:"totals"`
}

// Same reports whether nothing differs.
func (r *Report) Same() bool {
	return len(r.Provenance) == 0 && r.Totals.Added == 0 && r.Totals.Removed == 0 &&
		r.Totals.Reshaped == 0 && r.Totals.Changed == 0 && r.Totals.Mismatches == 0 && len(r.Companions) == 0
}

// Compare compares artifact a with b; the report's A and B are left for the
// caller to name. Every section of the common tensors is read and hashed.
// Errors come from reading the files; a payload that does not decode is an
// error only with opts.Trits.
func Compare(a, b *pack.Artifact, opts ...Options) (*Report, error) {
	var o Options
	if len(opts) > 0 {
		o = opts[0]
	}
	ma, mb := a.Manifest(), b.Manifest()
	r := &Report{
		Compared:   compared(o, ma, mb),
		Provenance: compareProvenance(ma, mb),
		Added:      []Tensor{},
		Removed:    []Tensor{},
		Reshaped:   []Reshape{},
		Changed:    []TensorChange{},
		Mismatches: []Mismatch{},
		Totals:     Totals{TensorsA: len(ma.Tensors), TensorsB: len(mb.Tensors), BytesA: a.Size(), BytesB: b.Size()},
	}
	inB := make(map[string]manifest.Tensor, len(mb.Tensors))
	for _, e := range mb.Tensors {
		inB[e.Name] = e
	}
	inA := make(map[string]bool, len(ma.Tensors))
	for _, ea := range ma.Tensors {
		inA[ea.Name] = true
		eb, ok := inB[ea.Name]
		switch {
		case !ok:
			r.Removed = append(r.Removed, summary(ea))
		case !slices.Equal(ea.Shape, eb.Shape):
			r.Reshaped = append(r.Reshaped, Reshape{Name: ea.Name, ShapeA: ea.Shape, ShapeB: eb.Shape})
		default:
			c, err := r.compareTensor(a, b, ea, eb, o)
			if err != nil {
				return nil, err
			}
			if len(c.Changed) == 0 {
				r.Totals.Unchanged++
			} else {
				r.Changed = append(r.Changed, c)
			}
			if c.SectionsDiffer {
				r.Totals.SectionsDiffer++
			}
			r.Totals.TritsCompared += c.TritsCompared
			r.Totals.TritsDiffer += c.TritsDiffer
		}
	}
	for _, eb := range mb.Tensors {
		if !inA[eb.Name] {
			r.Added = append(r.Added, summary(eb))
		}
	}
	var err error
	if r.Companions, err = compareCompanions(a, b); err != nil {
		return nil, err
	}
	t := &r.Totals
	t.Added, t.Removed, t.Reshaped, t.Changed = len(r.Added), len(r.Removed), len(r.Reshaped), len(r.Changed)
	t.TritsFraction = fraction(t.TritsDiffer, t.TritsCompared)
	t.Mismatches = len(r.Mismatches)
	return r, nil
}

func compared(o Options, ma, mb *manifest.Manifest) Compared {
	c := Compared{Sections: true, Trits: o.Trits,
		Summary: "section bytes (BLAKE3 of each section as read from both files) and the manifests' records; trits not decoded"}
	if o.Trits {
		c.Summary = "section bytes (BLAKE3 of each section as read from both files), the manifests' records, and the trits of ternary tensors (decoded where their sections differ)"
	}
	c.sourceCompared(ma, mb)
	return c
}

func summary(e manifest.Tensor) Tensor {
	return Tensor{Name: e.Name, Shape: e.Shape, Kind: e.Kind, Codec: e.Codec, Bytes: e.StoredBytes()}
}

func fraction(n, of int64) float64 {
	if of == 0 {
		return 0
	}
	return float64(n) / float64(of)
}

// readSection reads a section's bytes and returns them with their BLAKE3.
func readSection(a *pack.Artifact, s manifest.Section) ([]byte, string, error) {
	p := make([]byte, s.Length)
	if _, err := a.ReaderAt().ReadAt(p, s.Offset); err != nil && !(err == io.EOF && int64(len(p)) == s.Length) {
		return nil, "", fmt.Errorf("read section at byte %d: %w", s.Offset, err)
	}
	return p, manifest.HexHash(blake3.Sum256(p)), nil
}

// section is a tensor's bytes as read: payload and scales with their hashes.
type section struct {
	payload, scales       []byte
	payloadSum, scalesSum string
	payloadOK, scalesOK   bool // the hashes match the manifest's record
	recordedP, recordedS  string
}

func (r *Report) read(a *pack.Artifact, e manifest.Tensor, which string) (section, error) {
	var s section
	var err error
	if s.payload, s.payloadSum, err = readSection(a, e.Section); err != nil {
		return s, fmt.Errorf("%s: tensor %q: %w", which, e.Name, err)
	}
	s.recordedP, s.payloadOK = e.Section.BLAKE3, s.payloadSum == e.Section.BLAKE3
	if !s.payloadOK {
		r.Mismatches = append(r.Mismatches, Mismatch{Artifact: which, Tensor: e.Name, Section: "payload", Recorded: e.Section.BLAKE3, Actual: s.payloadSum})
	}
	s.scalesOK = true
	if e.Scales != nil {
		if s.scales, s.scalesSum, err = readSection(a, *e.Scales); err != nil {
			return s, fmt.Errorf("%s: tensor %q scales: %w", which, e.Name, err)
		}
		s.recordedS, s.scalesOK = e.Scales.BLAKE3, s.scalesSum == e.Scales.BLAKE3
		if !s.scalesOK {
			r.Mismatches = append(r.Mismatches, Mismatch{Artifact: which, Tensor: e.Name, Section: "scales", Recorded: e.Scales.BLAKE3, Actual: s.scalesSum})
		}
	}
	return s, nil
}

// compareTensor compares two entries of the same name and shape.
func (r *Report) compareTensor(a, b *pack.Artifact, ea, eb manifest.Tensor, o Options) (TensorChange, error) {
	c := TensorChange{
		Name: ea.Name, KindA: ea.Kind, KindB: eb.Kind, CodecA: ea.Codec, CodecB: eb.Codec,
		DTypeA: ea.DType, DTypeB: eb.DType,
		GranA: granularity(ea), GranB: granularity(eb), BytesA: ea.StoredBytes(), BytesB: eb.StoredBytes(),
	}
	if ea.Kind == manifest.KindTernary && ea.Scales == nil {
		c.ScaleA = ea.Scale
	}
	if eb.Kind == manifest.KindTernary && eb.Scales == nil {
		c.ScaleB = eb.Scale
	}
	sa, err := r.read(a, ea, "a")
	if err != nil {
		return c, err
	}
	sb, err := r.read(b, eb, "b")
	if err != nil {
		return c, err
	}
	c.SectionsDiffer = sa.payloadSum != sb.payloadSum || sa.scalesSum != sb.scalesSum

	mark := func(changed bool, aspect string) {
		if changed {
			c.Changed = append(c.Changed, aspect)
		}
	}
	mark(ea.Kind != eb.Kind, AspectKind)
	mark(ea.Codec != eb.Codec, AspectCodec)
	mark(ea.SourceDType != eb.SourceDType, AspectDType)
	mark(ea.DType != eb.DType, AspectStored)
	mark(c.GranA != c.GranB, AspectGran)
	scalesChanged := math.Float32bits(ea.Scale) != math.Float32bits(eb.Scale) || sa.scalesSum != sb.scalesSum
	mark(scalesChanged, AspectScale)
	if ea.Kind == eb.Kind && c.GranA == c.GranB {
		c.ScaleDrift = scaleDrift(ea, eb, sa.scales, sb.scales)
	}
	if ea.Kind == manifest.KindTernary && eb.Kind == manifest.KindTernary && o.Trits {
		n := int64(0)
		if ea.Codec != eb.Codec || sa.payloadSum != sb.payloadSum {
			if n, err = countDifferentTrits(ea, eb, sa.payload, sb.payload); err != nil {
				return c, err
			}
		}
		c.TritsCompared, c.TritsDiffer = manifest.NumElements(ea.Shape), n
		c.TritsFraction = fraction(n, c.TritsCompared)
		mark(n > 0, AspectTrits)
	}
	if ea.Stats != nil && eb.Stats != nil {
		c.RelRMSEA, c.RelRMSEB = ptr(ea.Stats.RelRMSE), ptr(eb.Stats.RelRMSE)
		c.CosineA, c.CosineB = ptr(ea.Stats.Cosine), ptr(eb.Stats.Cosine)
		c.ZeroA, c.ZeroB = ptr(ea.Stats.ZeroFraction), ptr(eb.Stats.ZeroFraction)
		mark(*ea.Stats != *eb.Stats, AspectStats)
	}
	mark(c.BytesA != c.BytesB, AspectBytes)
	// identities of the same kind only: a span identity changes with the
	// tensor's place in the file as well as its bytes
	mark(ea.SourceBLAKE3 != eb.SourceBLAKE3 && ea.SourceSpan == "" && eb.SourceSpan == "", AspectSource)
	mark(ea.SourceSpan != eb.SourceSpan && ea.SourceSpan != "" && eb.SourceSpan != "", AspectSource)
	if sa.payloadSum != sb.payloadSum && !slices.ContainsFunc(c.Changed, func(s string) bool {
		return s == AspectKind || s == AspectCodec || s == AspectStored || s == AspectGran || s == AspectTrits
	}) {
		c.Changed = append(c.Changed, AspectData)
	}
	return c, nil
}

func ptr(f float64) *float64 { return &f }

// scaleDrift is the largest |b − a| / a over the scales of two tensors of
// the same kind and granularity, or nil when they cannot be compared.
func scaleDrift(ea, eb manifest.Tensor, pa, pb []byte) *float64 {
	var xa, xb []float32
	switch {
	case ea.Kind == manifest.KindTernary && ea.Scales == nil && eb.Scales == nil:
		xa, xb = []float32{ea.Scale}, []float32{eb.Scale}
	case ea.Scales != nil && eb.Scales != nil && len(pa) == len(pb) && len(pa)%4 == 0:
		xa, xb = floats(pa), floats(pb)
	default:
		return nil
	}
	worst := 0.0
	for i := range xa {
		x, y := float64(xa[i]), float64(xb[i])
		var d float64
		switch {
		case x == y:
			d = 0
		case x == 0:
			d = math.Inf(1)
		default:
			d = math.Abs(y-x) / math.Abs(x)
		}
		if !(d <= worst) { // NaN counts as the worst
			worst = d
		}
	}
	if math.IsInf(worst, 0) || math.IsNaN(worst) {
		worst = math.MaxFloat64 // JSON has no infinity: "beyond any limit"
	}
	return &worst
}

func floats(p []byte) []float32 {
	out := make([]float32, len(p)/4)
	for i := range out {
		out[i] = math.Float32frombits(binary.LittleEndian.Uint32(p[4*i:]))
	}
	return out
}

func granularity(e manifest.Tensor) string {
	if e.Granularity == nil {
		return ""
	}
	return e.Granularity.String()
}

// countDifferentTrits decodes two trit payloads of the same shape and
// counts the positions that differ.
func countDifferentTrits(ea, eb manifest.Tensor, pa, pb []byte) (int64, error) {
	n := int(manifest.NumElements(ea.Shape))
	x, y := make([]int8, n), make([]int8, n)
	if err := pack.Codec(ea.Codec).Decode(x, pa); err != nil {
		return 0, fmt.Errorf("a: tensor %q: %w", ea.Name, err)
	}
	if err := pack.Codec(eb.Codec).Decode(y, pb); err != nil {
		return 0, fmt.Errorf("b: tensor %q: %w", eb.Name, err)
	}
	var d int64
	for i := range x {
		if x[i] != y[i] {
			d++
		}
	}
	return d, nil
}

// compareProvenance lists the manifest fields outside the tensors that
// differ, each side in words: "(none)" for an absent value, a policy as
// its rules separated by "; ".
func compareProvenance(a, b *manifest.Manifest) []Change {
	out := []Change{}
	add := func(field, x, y string) {
		if x != y {
			out = append(out, Change{Field: field, A: x, B: y})
		}
	}
	add("tool", orNone(a.Tool), orNone(b.Tool))
	add("created", orNone(a.Created), orNone(b.Created))
	ra, rb := jsonFields(a.Recipe), jsonFields(b.Recipe)
	for _, k := range unionKeys(ra, rb) {
		add("recipe."+k, fieldString(ra, k), fieldString(rb, k))
	}
	if pa, pb := rulesString(a.Policy), rulesString(b.Policy); pa != pb {
		out = append(out, Change{Field: "policy", A: pa, B: pb,
			RulesAdded: onlyIn(b.Policy, a.Policy), RulesRemoved: onlyIn(a.Policy, b.Policy)})
	}
	fa, fb := a.Source.Files, b.Source.Files
	for i := range max(len(fa), len(fb)) {
		add(fmt.Sprintf("source.files[%d]", i), fileString(fa, i), fileString(fb, i))
	}
	ma, mb := jsonFields(a.Source.Metadata), jsonFields(b.Source.Metadata)
	for _, k := range unionKeys(ma, mb) {
		add("source.metadata."+k, fieldString(ma, k), fieldString(mb, k))
	}
	return out
}

// onlyIn lists the rules of x that y does not have, in x's order.
func onlyIn(x, y []string) []string {
	var out []string
	for _, r := range x {
		if !slices.Contains(y, r) {
			out = append(out, r)
		}
	}
	return out
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

// rulesString writes a policy's rules in order, separated by "; ".
func rulesString(rules []string) string {
	if len(rules) == 0 {
		return "(none)"
	}
	return strings.Join(rules, "; ")
}

// jsonFields is v's JSON object as key → JSON text, so that every field of
// the recorded form is compared, whatever fields the type has.
func jsonFields(v any) map[string]string {
	b, err := json.Marshal(v)
	if err != nil {
		return map[string]string{"": fmt.Sprintf("(cannot encode: %v)", err)}
	}
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(b, &raw); err != nil {
		return map[string]string{"": string(b)}
	}
	out := make(map[string]string, len(raw))
	for k, r := range raw {
		out[k] = string(r)
	}
	return out
}

// unionKeys lists the keys of both maps, sorted.
func unionKeys[V any](a, b map[string]V) []string {
	keys := slices.Collect(maps.Keys(a))
	for k := range b {
		if _, ok := a[k]; !ok {
			keys = append(keys, k)
		}
	}
	slices.Sort(keys)
	return keys
}

func fileString(files []manifest.SourceFile, i int) string {
	if i >= len(files) {
		return "(none)"
	}
	f := files[i]
	return fmt.Sprintf("%s (%d bytes, BLAKE3 %s)", f.Name, f.Bytes, f.BLAKE3)
}

// fieldString is a field's JSON text (a string without its quotes), or
// "(none)" when it is absent.
func fieldString(m map[string]string, k string) string {
	v, ok := m[k]
	if !ok {
		return "(none)"
	}
	var s string
	if json.Unmarshal([]byte(v), &s) == nil {
		return s
	}
	return v
}
