package probe

import (
	"fmt"
	"math"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/tritmat"
)

// Activation arithmetic of an artifact's ternary layers.
const (
	// ActInt8: each token's input quantized to 8 bits by absmax, integer
	// sums of trits times codes, rescaled (the deployment arithmetic).
	ActInt8 = "int8"
	// ActFloat: the trits times float32 activations.
	ActFloat = "float"
)

// ArtifactWeights reads a packed artifact. Each section is read and its
// BLAKE3 checked when its tensor is used. Ternary matrices run in the
// activation arithmetic chosen; int8 tensors are codes × row scale and
// kept tensors their stored values, in float32.
type ArtifactWeights struct {
	a    *pack.Artifact
	name string
	act  string
}

// NewArtifactWeights reads the forward pass's tensors from a (an opened
// artifact; the caller closes it), name naming it in messages; act is
// ActInt8 or ActFloat.
func NewArtifactWeights(a *pack.Artifact, name, act string) (*ArtifactWeights, error) {
	if act != ActInt8 && act != ActFloat {
		return nil, fmt.Errorf("activations %q (valid: int8, float)", act)
	}
	return &ArtifactWeights{a: a, name: name, act: act}, nil
}

func (w *ArtifactWeights) Name() string { return w.name }
func (w *ArtifactWeights) Close() error { return nil }

func isFloatEntry(e manifest.Tensor) bool {
	switch e.Kind {
	case manifest.KindTernary, manifest.KindInt8:
		return true
	}
	_, known := convert.DTypeSize(e.DType)
	return known && (e.DType == "F64" || e.DType == "F32" || e.DType == "F16" || e.DType == "BF16" ||
		e.DType == "F8_E4M3" || e.DType == "F8_E5M2")
}

func (w *ArtifactWeights) FloatNames() []string {
	var names []string
	for _, e := range w.a.Tensors() {
		if isFloatEntry(e) {
			names = append(names, e.Name)
		}
	}
	return names
}

func (w *ArtifactWeights) Shape(name string) ([]int64, bool) {
	t, err := w.a.Tensor(name)
	if err != nil || !isFloatEntry(t.Entry) {
		return nil, false
	}
	return t.Entry.Shape, true
}

func (w *ArtifactWeights) tensor(name string) (*pack.Tensor, error) {
	t, err := w.a.Tensor(name)
	if err != nil || !isFloatEntry(t.Entry) {
		return nil, fmt.Errorf("%w: %s: no float tensor %q", ErrLayout, w.name, name)
	}
	return t, nil
}

func (w *ArtifactWeights) Vector(name string) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	v := make([]float32, t.Len())
	return v, t.DecodeFloat32(v)
}

// rowsOf returns a decoder of a tensor's rows as float32 (scale × trit,
// scale × code, or the stored values), after reading and checking its
// sections.
func (w *ArtifactWeights) rowsOf(t *pack.Tensor) (rows, cols int, dec rowDecoder, err error) {
	e := t.Entry
	rows, cols, ok := matrixDims(e.Shape)
	if !ok {
		return 0, 0, nil, fmt.Errorf("%w: tensor %q has shape %v, not a matrix", ErrLayout, e.Name, e.Shape)
	}
	switch e.Kind {
	case manifest.KindKept:
		p, err := t.VerifiedPayload()
		if err != nil {
			return 0, 0, nil, err
		}
		size, _ := convert.DTypeSize(e.DType)
		return rows, cols, func(r0, r1 int, dst []float32) error {
			if err := convert.DecodeFloat32(e.DType, p[r0*cols*size:r1*cols*size], dst); err != nil {
				return fmt.Errorf("tensor %q: %w", e.Name, err)
			}
			return nil
		}, nil
	case manifest.KindInt8:
		p, err := t.VerifiedPayload()
		if err != nil {
			return 0, 0, nil, err
		}
		scales, err := t.Scales()
		if err != nil {
			return 0, 0, nil, err
		}
		return rows, cols, func(r0, r1 int, dst []float32) error {
			for r := r0; r < r1; r++ {
				s := scales[r]
				for c, b := range p[r*cols : (r+1)*cols] {
					dst[(r-r0)*cols+c] = s * float32(int8(b))
				}
			}
			return nil
		}, nil
	}
	m, scales, err := w.matrix(t)
	if err != nil {
		return 0, 0, nil, err
	}
	g := t.GroupSize()
	return rows, cols, func(r0, r1 int, dst []float32) error {
		trits := make([]int8, len(dst))
		if err := tritmat.Decode(trits, m, r0*cols); err != nil {
			return fmt.Errorf("tensor %q: %w", e.Name, err)
		}
		for i, v := range trits {
			dst[i] = scales[(r0*cols+i)/g] * float32(v)
		}
		return nil
	}, nil
}

// matrix reads a ternary tensor's packed trits (an entropy frame is
// decoded and repacked as bits2) and its scales.
func (w *ArtifactWeights) matrix(t *pack.Tensor) (tritmat.Matrix, []float32, error) {
	e := t.Entry
	rows, cols, _ := matrixDims(e.Shape)
	m := tritmat.Matrix{Codec: e.Codec, Rows: rows, Cols: cols}
	var err error
	switch e.Codec {
	case tritmat.Bits2, tritmat.Base3:
		m.Data, err = t.VerifiedPayload()
	default:
		trits := make([]int8, t.Len())
		if err = t.DecodeTrits(trits); err == nil {
			m.Codec, m.Data = tritmat.Bits2, pack.Bits2.Encode(nil, trits)
		}
	}
	if err != nil {
		return m, nil, err
	}
	if err := m.Check(); err != nil {
		return m, nil, fmt.Errorf("tensor %q: %w", e.Name, err)
	}
	scales, err := t.Scales()
	return m, scales, err
}

func (w *ArtifactWeights) Rows(name string, ids []int32) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	rows, cols, dec, err := w.rowsOf(t)
	if err != nil {
		return nil, err
	}
	out := make([]float32, len(ids)*cols)
	for i, id := range ids {
		if int(id) < 0 || int(id) >= rows {
			return nil, fmt.Errorf("%w: token id %d outside %q's %d rows", ErrTokens, id, name, rows)
		}
		if err := dec(int(id), int(id)+1, out[i*cols:(i+1)*cols]); err != nil {
			return nil, err
		}
	}
	return out, nil
}

func (w *ArtifactWeights) Linear(name string, x []float32, ntok int) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	if rows, cols, ok := matrixDims(t.Entry.Shape); !ok || len(x) != ntok*cols {
		return nil, fmt.Errorf("%w: tensor %q of shape %v times %d activations of %d tokens", ErrLayout, name, t.Entry.Shape, len(x), ntok)
	} else if t.Entry.Kind == manifest.KindTernary && w.act == ActInt8 {
		return w.int8Linear(t, rows, cols, x, ntok)
	}
	rows, cols, dec, err := w.rowsOf(t)
	if err != nil {
		return nil, err
	}
	return floatLinear(rows, cols, dec, x, ntok)
}

// QuantizeInt8 quantizes one token's activations to 8 bits by absmax:
// s = 127 / max|x| (float32), q = clip(round(x·s), −128, 127), rounding
// x·s (a float32 product) half to even, as tensor libraries round. An
// all-zero x, or one so small that s overflows float32 (max|x| below
// 127 / 3.4e38), gives s = 0 and zero codes: the layer's output is 0; a
// NaN in x gives s = NaN, so the output is NaN.
func QuantizeInt8(q []int8, x []float32) (s float32) {
	var amax float32
	for _, v := range x {
		amax = max(amax, float32(math.Abs(float64(v))))
	}
	s = 127 / amax
	if amax == 0 || math.IsInf(float64(s), 0) || amax != amax {
		clear(q)
		if amax != amax {
			return amax // NaN in, NaN out: the layer's output is NaN
		}
		return 0
	}
	for i, v := range x {
		r := math.RoundToEven(float64(v * s))
		q[i] = int8(max(-128, min(127, r)))
	}
	return s
}

// int8Linear runs a ternary matrix in the deployment arithmetic: per
// token, q = QuantizeInt8(x); per scale group, the exact integer sum of
// trits × codes (tritmat.MulInt8Rows); y = Σ_groups float32(sum) ×
// scale / s, in float32, groups in order.
func (w *ArtifactWeights) int8Linear(t *pack.Tensor, rows, cols int, x []float32, ntok int) ([]float32, error) {
	m, scales, err := w.matrix(t)
	if err != nil {
		return nil, err
	}
	g := t.GroupSize()
	kg := min(g, cols) // the kernel's group: a row, or a scale group within it
	groups := cols / kg
	q := make([]int8, len(x))
	s := make([]float32, ntok)
	for tok := range ntok {
		s[tok] = QuantizeInt8(q[tok*cols:(tok+1)*cols], x[tok*cols:(tok+1)*cols])
	}
	y := make([]float32, ntok*rows)
	const rowsPer = 256
	parts := (rows + rowsPer - 1) / rowsPer
	err = parallel(parts, func(next func() (int, bool)) error {
		var sums []int32
		for {
			p, ok := next()
			if !ok {
				return nil
			}
			r0, r1 := p*rowsPer, min(rows, (p+1)*rowsPer)
			n := (r1 - r0) * groups
			sums = append(sums[:0], make([]int32, ntok*n)...)
			if err := tritmat.MulInt8Rows(sums, m, kg, q, ntok, r0, r1); err != nil {
				return fmt.Errorf("tensor %q: %w", t.Entry.Name, err)
			}
			for tok := range ntok {
				if s[tok] == 0 {
					continue
				}
				for r := r0; r < r1; r++ {
					var acc float32
					for j := range groups {
						acc += float32(sums[tok*n+(r-r0)*groups+j]) * scales[(r*cols+j*kg)/g]
					}
					y[tok*rows+r] = acc / s[tok]
				}
			}
		}
	})
	return y, err
}
