// Package report describes a ternkit artifact for people: a Summary of its
// tensors and totals (what `ternkit inspect` prints) and a self-contained
// HTML page with charts (what `ternkit report` writes). It reads the
// manifest only; checking the sections is the verify package's job.
package report

import (
	"strings"

	"ternkit/convert"
	"ternkit/internal/filedigest"
	"ternkit/manifest"
	"ternkit/modelconfig"
	"ternkit/pack"
)

// Tensor is one tensor of the artifact as people read it.
type Tensor struct {
	Name          string  `json:"name"`
	Shape         []int64 `json:"shape"`
	Kind          string  `json:"kind"`
	Codec         string  `json:"codec"`
	SourceDType   string  `json:"source_dtype"`
	DType         string  `json:"dtype,omitempty"`       // stored dtype of a kept tensor
	Granularity   string  `json:"granularity,omitempty"` // ternary and int8 tensors
	Exact         bool    `json:"exact,omitempty"`       // ternary, lossless
	Bytes         int64   `json:"bytes"`                 // payload and scales sections
	BitsPerWeight float64 `json:"bits_per_weight"`
	ZeroFraction  float64 `json:"zero_fraction"`
	Scale         float32 `json:"scale"`    // the one scale of a ternary tensor at tensor granularity, else 0
	RelRMSE       float64 `json:"rel_rmse"` // 0 for a tensor kept byte for byte
	Cosine        float64 `json:"cosine"`   // 1 for a tensor kept byte for byte
	params        int64
	zero          int64
}

// Lossy reports whether the tensor's stored values differ from the source
// (ternary, int8, or kept in another dtype): those carry statistics.
func (t *Tensor) Lossy() bool { return t.Kind != manifest.KindKept || t.DType != t.SourceDType }

// Ternary reports whether the tensor is stored as trits.
func (t *Tensor) Ternary() bool { return t.Kind == manifest.KindTernary }

// WeightMemory projects the memory the model's weights take: ternary
// parameters at the artifact's bits per weight, or at 16 bits each (F16);
// int8 and kept tensors count as stored in both.
type WeightMemory struct {
	TernaryForm int64 `json:"ternary_form_bytes"`
	F16Form     int64 `json:"f16_form_bytes"`
}

// Summary is what an artifact holds, with the totals people ask for.
type Summary struct {
	Artifact       string          `json:"artifact"`
	Bytes          int64           `json:"bytes"`
	FileBLAKE3     string          `json:"file_blake3"`
	SHA256         string          `json:"sha256"` // of the whole file, as sha256sum prints it
	ManifestBLAKE3 string          `json:"manifest_blake3"`
	Tool           string          `json:"tool"`
	Created        string          `json:"created,omitempty"` // set when the build had SOURCE_DATE_EPOCH
	Recipe         convert.Recipe  `json:"recipe"`
	Policy         []string        `json:"policy,omitempty"` // the rules the artifact was packed with
	Source         manifest.Source `json:"source"`
	Totals         manifest.Totals `json:"totals"`
	Ratio          float64         `json:"ratio"`         // source bytes / artifact bytes
	ZeroFraction   float64         `json:"zero_fraction"` // zero trits / ternary parameters
	WeightMemory   WeightMemory    `json:"weight_memory"`
	Tensors        []Tensor        `json:"tensors"`
	// Companions are the files carried beside the weights; Architecture is
	// their config.json when it is a model config (ArchitectureSummary
	// says it in one line).
	Companions          []Companion         `json:"companions,omitempty"`
	Architecture        *modelconfig.Config `json:"architecture,omitempty"`
	ArchitectureSummary string              `json:"architecture_summary,omitempty"`
}

// Summarize opens the artifact at path, checks its structure and manifest
// hash (not its sections), hashes the whole file and summarizes it.
func Summarize(path string) (*Summary, error) {
	a, err := pack.Open(path)
	if err != nil {
		return nil, err
	}
	defer a.Close()
	d, err := filedigest.File(path)
	if err != nil {
		return nil, err
	}
	s := summarize(path, a, d.BLAKE3)
	s.SHA256 = d.SHA256
	return s, nil
}

func summarize(path string, a *pack.Artifact, fileSum string) *Summary {
	m := a.Manifest()
	t := m.Totals
	s := &Summary{
		Artifact: path, Bytes: a.Size(), FileBLAKE3: fileSum, ManifestBLAKE3: manifest.HexHash(a.ManifestHash()),
		Tool: m.Tool, Created: m.Created, Recipe: m.Recipe, Policy: m.Policy, Source: m.Source, Totals: t,
		Ratio: ratio(t.SourceBytes, a.Size()),
		WeightMemory: WeightMemory{
			TernaryForm: t.TernarySectionBytes + t.Int8SectionBytes + t.KeptSectionBytes,
			F16Form:     2*t.TernaryParams + t.Int8SectionBytes + t.KeptSectionBytes,
		},
		Tensors: make([]Tensor, 0, len(m.Tensors)),
	}
	var zero int64
	for _, e := range m.Tensors {
		n := manifest.NumElements(e.Shape)
		row := Tensor{Name: e.Name, Shape: e.Shape, Kind: e.Kind, Codec: e.Codec, SourceDType: e.SourceDType,
			DType: e.DType, Exact: e.Exact, Bytes: e.StoredBytes(), Scale: e.Scale, Cosine: 1, params: n}
		if e.Granularity != nil {
			row.Granularity = e.Granularity.String()
		}
		row.BitsPerWeight = 8 * ratio(row.Bytes, n)
		if e.Trits != nil {
			row.zero = e.Trits.Zero
			zero += e.Trits.Zero
		}
		if e.Stats != nil {
			row.ZeroFraction, row.RelRMSE, row.Cosine = e.Stats.ZeroFraction, e.Stats.RelRMSE, e.Stats.Cosine
		}
		s.Tensors = append(s.Tensors, row)
	}
	s.ZeroFraction = ratio(zero, t.TernaryParams)
	addCompanions(s, a)
	return s
}

// ratio is a/b, or 0 when b is not positive.
func ratio(a, b int64) float64 {
	if b <= 0 {
		return 0
	}
	return float64(a) / float64(b)
}

// Layer is a group of tensors that belong to one layer of the model:
// tensors whose names share the prefix up to their first numeric
// component ("blocks.3.attn.q.weight" is in "blocks.3"), or, without a
// numeric component, their name less its last component ("lm_head.weight"
// is "lm_head").
type Layer struct {
	Name           string
	Tensors        int
	TernaryTensors int
	Params         int64   // all parameters of the layer
	Bytes          int64   // all section bytes of the layer
	BitsPerWeight  float64 // 8 × Bytes / Params, kept tensors included
	ZeroFraction   float64 // zero trits / ternary parameters; 0 without ternary tensors
	ternaryParams  int64
	zero           int64
}

// Layers groups the tensors into layers, in order of first appearance.
func (s *Summary) Layers() []Layer {
	var layers []Layer
	index := map[string]int{}
	for _, t := range s.Tensors {
		name := LayerName(t.Name)
		i, ok := index[name]
		if !ok {
			i = len(layers)
			index[name] = i
			layers = append(layers, Layer{Name: name})
		}
		l := &layers[i]
		l.Tensors++
		l.Params += t.params
		l.Bytes += t.Bytes
		if t.Ternary() {
			l.TernaryTensors++
			l.ternaryParams += t.params
			l.zero += t.zero
		}
	}
	for i := range layers {
		l := &layers[i]
		l.BitsPerWeight = 8 * ratio(l.Bytes, l.Params)
		l.ZeroFraction = ratio(l.zero, l.ternaryParams)
	}
	return layers
}

// LayerName is the layer a tensor name belongs to (see Layer).
func LayerName(tensor string) string {
	parts := strings.Split(tensor, ".")
	for i, p := range parts {
		if p != "" && strings.Trim(p, "0123456789") == "" {
			return strings.Join(parts[:i+1], ".")
		}
	}
	if len(parts) > 1 {
		return strings.Join(parts[:len(parts)-1], ".")
	}
	return tensor
}
