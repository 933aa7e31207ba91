// Package diff compares two ternkit artifacts, typically two releases of a
// model: what changed in their provenance, which tensors were added,
// removed or reshaped, and for each common tensor its kind, codec, scale,
// the fraction of trits that differ and its size.
//
// diff reads what the artifacts record; it does not verify them.
package diff

import (
	"encoding/json"
	"fmt"
	"maps"
	"math"
	"slices"

	"ternkit/manifest"
	"ternkit/pack"
)

// Change is one provenance field that differs.
type Change struct {
	Field string `json:"field"`
	A     string `json:"a"`
	B     string `json:"b"`
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

// Aspects of a common tensor that can change, as TensorChange.Changed
// lists them.
const (
	AspectKind   = "kind"
	AspectCodec  = "codec"
	AspectDType  = "source_dtype"
	AspectStored = "dtype"       // the stored dtype of a kept tensor
	AspectGran   = "granularity" // tensor, row or group:N
	AspectScale  = "scale"       // the one scale, or any of the scales section"
	AspectTrits  = "trits"
	AspectBytes  = "bytes"
	AspectSource = "source" // the source tensor's bytes (source_blake3)
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
	ScaleA  float32  `json:"scale_a,omitempty"`
	ScaleB  float32  `json:"scale_b,omitempty"`
	GranA   string   `json:"granularity_a,omitempty"`
	GranB   string   `json:"granularity_b,omitempty"`
	// TritsCompared is the element count when both are ternary, else 0.
	TritsCompared int64   `json:"trits_compared"`
	TritsDiffer   int64   `json:"trits_differ"`
	TritsFraction float64 `json:"trits_differ_fraction"`
	BytesA        int64   `json:"bytes_a"`
	BytesB        int64   `json:"bytes_b"`
}

// Totals sums the comparison.
type Totals struct {
	TensorsA      int     `json:"tensors_a"`
	TensorsB      int     `json:"tensors_b"`
	Added         int     `json:"added"`
	Removed       int     `json:"removed"`
	Reshaped      int     `json:"reshaped"`
	Changed       int     `json:"changed"`
	Unchanged     int     `json:"unchanged"`
	BytesA        int64   `json:"bytes_a"` // artifact sizes
	BytesB        int64   `json:"bytes_b"`
	TritsCompared int64   `json:"trits_compared"`
	TritsDiffer   int64   `json:"trits_differ"`
	TritsFraction float64 `json:"trits_differ_fraction"`
}

// Report is the comparison of artifact A (the older) with B.
type Report struct {
	A          string         `json:"a"`
	B          string         `json:"b"`
	Provenance []Change       `json:"provenance"`
	Added      []Tensor       `json:"added"`
	Removed    []Tensor       `json:"removed"`
	Reshaped   []Reshape      `json:"reshaped"`
	Changed    []TensorChange `json:"changed"`
	// Companions are the companion files added, removed or changed.
	Companions []CompanionChange `json:"companions"`
	Totals     Totals            `json:"totals"`
}

// Same reports whether nothing differs.
func (r *Report) Same() bool {
	return len(r.Provenance) == 0 && r.Totals.Added == 0 && r.Totals.Removed == 0 &&
		r.Totals.Reshaped == 0 && r.Totals.Changed == 0 && len(r.Companions) == 0
}

// Compare compares artifact a with b; the report's A and B are left for the
// caller to name. Errors come from reading or decoding a trit payload.
func Compare(a, b *pack.Artifact) (*Report, error) {
	ma, mb := a.Manifest(), b.Manifest()
	r := &Report{
		Provenance: compareProvenance(ma, mb),
		Added:      []Tensor{},
		Removed:    []Tensor{},
		Reshaped:   []Reshape{},
		Changed:    []TensorChange{},
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
			c, err := compareTensor(a, b, ea, eb)
			if err != nil {
				return nil, err
			}
			if len(c.Changed) == 0 {
				r.Totals.Unchanged++
			} else {
				r.Changed = append(r.Changed, c)
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
	return r, nil
}

func summary(e manifest.Tensor) Tensor {
	return Tensor{Name: e.Name, Shape: e.Shape, Kind: e.Kind, Codec: e.Codec, Bytes: e.Section.Length}
}

func fraction(n, of int64) float64 {
	if of == 0 {
		return 0
	}
	return float64(n) / float64(of)
}

// compareTensor compares two entries of the same name and shape.
func compareTensor(a, b *pack.Artifact, ea, eb manifest.Tensor) (TensorChange, error) {
	c := TensorChange{
		Name: ea.Name, KindA: ea.Kind, KindB: eb.Kind, CodecA: ea.Codec, CodecB: eb.Codec,
		ScaleA: ea.Scale, ScaleB: eb.Scale, GranA: granularity(ea), GranB: granularity(eb),
		BytesA: ea.StoredBytes(), BytesB: eb.StoredBytes(),
	}
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
	mark(math.Float32bits(ea.Scale) != math.Float32bits(eb.Scale) || scalesHash(ea) != scalesHash(eb), AspectScale)
	if ea.Kind == manifest.KindTernary && eb.Kind == manifest.KindTernary {
		n, err := countDifferentTrits(a, b, ea, eb)
		if err != nil {
			return c, err
		}
		c.TritsCompared, c.TritsDiffer = manifest.NumElements(ea.Shape), n
		c.TritsFraction = fraction(n, c.TritsCompared)
		mark(n > 0, AspectTrits)
	}
	mark(c.BytesA != c.BytesB, AspectBytes)
	mark(ea.SourceBLAKE3 != eb.SourceBLAKE3, AspectSource)
	if len(c.Changed) == 0 && ea.Section.BLAKE3 != eb.Section.BLAKE3 {
		c.Changed = append(c.Changed, AspectData)
	}
	return c, nil
}

func granularity(e manifest.Tensor) string {
	if e.Granularity == nil {
		return ""
	}
	return e.Granularity.String()
}

func scalesHash(e manifest.Tensor) string {
	if e.Scales == nil {
		return ""
	}
	return e.Scales.BLAKE3
}

// countDifferentTrits counts the positions where two ternary tensors of the
// same shape hold different trits.
func countDifferentTrits(a, b *pack.Artifact, ea, eb manifest.Tensor) (int64, error) {
	if ea.Codec == eb.Codec && ea.Section.BLAKE3 == eb.Section.BLAKE3 {
		return 0, nil
	}
	ta, err := a.Tensor(ea.Name)
	if err != nil {
		return 0, err
	}
	tb, err := b.Tensor(eb.Name)
	if err != nil {
		return 0, err
	}
	x, y := make([]int8, ta.Len()), make([]int8, tb.Len())
	if err := ta.DecodeTrits(x); err != nil {
		return 0, err
	}
	if err := tb.DecodeTrits(y); err != nil {
		return 0, err
	}
	var n int64
	for i := range x {
		if x[i] != y[i] {
			n++
		}
	}
	return n, nil
}

// compareProvenance lists the manifest fields outside the tensors that differ.
func compareProvenance(a, b *manifest.Manifest) []Change {
	out := []Change{}
	add := func(field string, x, y any) {
		if sx, sy := fmt.Sprint(x), fmt.Sprint(y); sx != sy {
			out = append(out, Change{Field: field, A: sx, B: sy})
		}
	}
	add("tool", a.Tool, b.Tool)
	add("created", a.Created, b.Created)
	ra, rb := jsonFields(a.Recipe), jsonFields(b.Recipe)
	for _, k := range unionKeys(ra, rb) {
		add("recipe."+k, fieldString(ra, k), fieldString(rb, k))
	}
	add("policy", fmt.Sprintf("%q", a.Policy), fmt.Sprintf("%q", b.Policy))
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

// fieldString is a field's JSON text, or "(none)" when it is absent.
func fieldString(m map[string]string, k string) string {
	if v, ok := m[k]; ok {
		return v
	}
	return "(none)"
}
