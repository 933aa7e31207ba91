// Package report describes a ternkit artifact for people: a Summary of its
// tensors and totals (what `ternkit inspect` prints) and a self-contained
// HTML page with charts (what `ternkit report` writes). It reads the
// manifest only; checking the sections is the verify package's job.
package report

import (
	"slices"
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

// StoredKind is the kind with the stored dtype of a converted kept tensor:
// "kept:f16" for a tensor kept as F16 from another dtype.
func (t *Tensor) StoredKind() string {
	if t.Kind == manifest.KindKept && t.DType != t.SourceDType {
		return "kept:" + strings.ToLower(t.DType)
	}
	return t.Kind
}

// Ternary reports whether the tensor is stored as trits.
func (t *Tensor) Ternary() bool { return t.Kind == manifest.KindTernary }

// WeightMemory is the memory a runtime holds the weights in, against the
// same model in 16-bit floats.
//
// TernaryForm is the artifact's weights as a runtime uses them in place:
// a ternary tensor at its decodable codec's size (base3 ⌈n/5⌉ or bits2
// ⌈n/4⌉ bytes; an entropy frame must be decoded first, so it counts at its
// base3 size) plus 4 bytes per scale (one for a tensor-granularity scale);
// an int8 tensor at 1 byte per value plus 4 bytes per row scale; a kept
// tensor as stored. F16Form is every tensor of a float source dtype at 2
// bytes per value (IEEE 754 binary16), whatever the artifact did with it,
// and every other tensor (integers, BOOL) as stored.
type WeightMemory struct {
	TernaryForm int64 `json:"ternary_form_bytes"`
	F16Form     int64 `json:"f16_form_bytes"`
}

// runtimeBytes is a tensor's share of WeightMemory.TernaryForm.
func runtimeBytes(e *manifest.Tensor) int64 {
	if e.Kind != manifest.KindTernary {
		return e.StoredBytes()
	}
	n := manifest.NumElements(e.Shape)
	codec := e.Codec
	if codec != string(pack.Base3) && codec != string(pack.Bits2) {
		codec = string(pack.Base3) // entropy: decoded to base3 digits
	}
	payload, _ := manifest.TritPayloadLen(codec, n)
	scales := int64(4)
	if e.Scales != nil {
		scales = e.Scales.Length
	}
	return payload + scales
}

// f16Bytes is a tensor's share of WeightMemory.F16Form.
func f16Bytes(e *manifest.Tensor) int64 {
	if (&convert.Tensor{DType: e.SourceDType}).IsFloat() {
		return 2 * manifest.NumElements(e.Shape)
	}
	return e.StoredBytes()
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
		Ratio:   ratio(t.SourceBytes, a.Size()),
		Tensors: make([]Tensor, 0, len(m.Tensors)),
	}
	var zero int64
	for i := range m.Tensors {
		e := &m.Tensors[i]
		s.WeightMemory.TernaryForm += runtimeBytes(e)
		s.WeightMemory.F16Form += f16Bytes(e)
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
// component ("model.layers.3.self_attn.q_proj.weight" is in "model.layers.3"), or, without a
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
	// Quantized are the ternary and int8 tensors: their count, and their
	// bits per weight (8 × their bytes / their parameters, scales included).
	Quantized     int
	QuantizedBits float64
	// KeptDTypes lists the stored dtypes of the kept tensors, in order of
	// first appearance.
	KeptDTypes []string
	// Exact counts the quantized tensors stored losslessly; the error
	// summary is over the others (Lossy of them): the smallest, median and
	// largest relative RMSE.
	Exact                     int
	Lossy                     int
	ErrMin, ErrMedian, ErrMax float64
	ternaryParams             int64
	zero                      int64
	quantParams, quantBytes   int64
	errs                      []float64
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
		switch {
		case t.Kind == manifest.KindKept:
			if !slices.Contains(l.KeptDTypes, t.DType) {
				l.KeptDTypes = append(l.KeptDTypes, t.DType)
			}
		case t.Exact:
			l.Quantized++
			l.Exact++
			l.quantParams += t.params
			l.quantBytes += t.Bytes
		default:
			l.Quantized++
			l.quantParams += t.params
			l.quantBytes += t.Bytes
			l.errs = append(l.errs, t.RelRMSE)
		}
	}
	for i := range layers {
		l := &layers[i]
		l.BitsPerWeight = 8 * ratio(l.Bytes, l.Params)
		l.ZeroFraction = ratio(l.zero, l.ternaryParams)
		l.QuantizedBits = 8 * ratio(l.quantBytes, l.quantParams)
		l.Lossy = len(l.errs)
		if l.Lossy > 0 {
			e := slices.Sorted(slices.Values(l.errs))
			l.ErrMin, l.ErrMax = e[0], e[len(e)-1]
			if n := len(e); n%2 == 1 {
				l.ErrMedian = e[n/2]
			} else {
				l.ErrMedian = (e[n/2-1] + e[n/2]) / 2
			}
		}
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
