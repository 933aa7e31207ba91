package pack

import (
	"errors"

	"ternkit/convert"
	"ternkit/manifest"
)

// pieceElements bounds the float32 copy of a tensor that is int8-coded or
// kept in another float dtype: it is decoded and coded this many elements
// (whole rows for int8, at least one) at a time, so that its float work
// costs a piece of memory, not 4 bytes per element of a vocabulary-sized
// matrix. The bytes written are the same for any piece size (a variable
// for tests).
var pieceElements = 1 << 20

// int8Rows codes tensor t's rows to int8, a piece of rows at a time.
func (q *quantizeBuffers) int8Rows(e *manifest.Tensor, t *convert.Tensor, raw []byte, cols int, fail func(error) error) (sections, error) {
	n := int(t.NumElements())
	size, _ := convert.DTypeSize(t.DType)
	rows, err := convert.NewInt8Rows(n, cols)
	if err != nil {
		return sections{}, fail(err)
	}
	step := n
	if r := rows.RowSize(); r > 0 {
		step = max(1, pieceElements/r) * r
	}
	codes := make([]byte, n)
	for start := 0; start < n; start += step {
		end := min(n, start+step)
		q.floats = grow(q.floats, end-start)
		// NaN, Inf and F64 overflow refused, named in the whole tensor
		if err := t.DecodeWeightsAt(raw[start*size:end*size], start, q.floats); err != nil {
			return sections{}, err
		}
		if err := rows.Add(q.floats, unsafeBytesInt8(codes[start:end])); err != nil {
			return sections{}, fail(err)
		}
	}
	scales, stats := rows.Result()
	row := convert.Granularity{Kind: convert.GranRow}
	e.Kind, e.Codec, e.Granularity, e.Stats = manifest.KindInt8, manifest.CodecRaw, &row, &stats
	return sections{payload: codes, scales: appendFloat32s([]byte{}, scales)}, nil
}

// convertDType writes tensor t in float dtype target, a piece at a time,
// with the statistics of the conversion.
func (q *quantizeBuffers) convertDType(e *manifest.Tensor, t *convert.Tensor, raw []byte, target string, fail func(error) error) (sections, error) {
	n := int(t.NumElements())
	size, _ := convert.DTypeSize(t.DType)
	outSize, _ := convert.DTypeSize(target)
	out := make([]byte, 0, n*outSize)
	var cmp convert.Comparison
	var back []float32
	for start := 0; start < n || start == 0; start += pieceElements {
		end := min(n, start+pieceElements)
		q.floats = grow(q.floats, end-start)
		at := func(err error) error {
			var nf *convert.NonFiniteError
			if errors.As(err, &nf) {
				nf.Index += start
			}
			return fail(err)
		}
		if err := convert.DecodeFloat32(t.DType, raw[start*size:end*size], q.floats); err != nil {
			return sections{}, at(err)
		}
		var err error
		if out, err = convert.EncodeFloat32(out, target, q.floats); err != nil {
			return sections{}, at(err)
		}
		back = grow(back, end-start)
		if err := convert.DecodeFloat32(target, out[start*outSize:], back); err != nil {
			return sections{}, at(err)
		}
		cmp.Add(q.floats, back)
		if end == n {
			break
		}
	}
	stats := cmp.Stats()
	e.Kind, e.Codec, e.DType, e.Stats = manifest.KindKept, manifest.CodecRaw, target, &stats
	return sections{payload: out}, nil
}
