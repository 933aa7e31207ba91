package verify

import (
	"bytes"
	"fmt"

	"ternkit/convert"
	"ternkit/pack"
)

// pieceElements bounds the float32 copy of an int8 or dtype-changed
// tensor's source, which is decoded, coded again and compared with the
// artifact a piece at a time (whole rows for int8), as pack writes it (a
// variable for tests).
var pieceElements = 1 << 20

// readPiece reads length bytes at offset off of the tensor's section
// into the scratch space; on a short read the section's own error names it.
func (b *redoBuffers) readPiece(a *pack.Artifact, t *pack.Tensor, off, length int64) ([]byte, error) {
	s := t.Entry.Section
	if s.Length < 0 || s.Offset < 0 || off+length > s.Length || s.Length > a.Size()-s.Offset {
		_, err := t.Payload()
		if err == nil {
			err = fmt.Errorf("section at byte %d holds %d bytes, the tensor needs %d", s.Offset, s.Length, off+length)
		}
		return nil, err
	}
	p := grow(&b.payload, int(length))
	if _, err := a.ReaderAt().ReadAt(p, s.Offset+off); err != nil {
		_, perr := t.Payload()
		if perr == nil {
			perr = err
		}
		return nil, perr
	}
	return p, nil
}

// redoInt8 codes the source rows to int8 again, a piece of rows at a time,
// and returns what differs from the artifact, or "": the scales, then the
// first code, then the statistics, as one pass over the tensor would. It
// records the tensor's bound excess in v.
func (b *redoBuffers) redoInt8(a *pack.Artifact, t *pack.Tensor, raw []byte, v *tensorVerdict) string {
	e := t.Entry
	n := t.Len()
	size, _ := convert.DTypeSize(e.SourceDType)
	cols := convert.Columns(e.Shape)
	rows, err := convert.NewInt8Rows(n, cols)
	if err != nil {
		return fmt.Sprintf("re-quantize: %v", err)
	}
	stored, err := t.Scales()
	if err != nil {
		return err.Error()
	}
	step := n
	if r := rows.RowSize(); r > 0 {
		step = max(1, pieceElements/r) * r
	}
	codes := ""
	v.excess, v.at = 0, -1
	for start := 0; start < n; start += step {
		end := min(n, start+step)
		w := grow(&b.weights, end-start)
		if err := convert.DecodeFloat32(e.SourceDType, raw[start*size:end*size], w); err != nil {
			return fmt.Sprintf("decode source: %v", err)
		}
		fresh := grow(&b.fresh, end-start)
		if err := rows.Add(w, fresh); err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		payload, err := b.readPiece(a, t, int64(start), int64(end-start))
		if err != nil {
			return err.Error()
		}
		packed := grow(&b.stored, end-start)
		for i, c := range payload {
			packed[i] = int8(c)
		}
		r0, r1 := start/cols, end/cols
		excess, at := convert.Int8BoundExcess(w, packed, stored[min(r0, len(stored)):min(r1, len(stored))], cols)
		if at >= 0 && (v.at < 0 || excess > v.excess) {
			v.excess, v.at = excess, at+start
		}
		if codes == "" {
			for i := range packed {
				if packed[i] != fresh[i] {
					codes = fmt.Sprintf("int8 code %d is %d, re-quantizing the source gives %d", start+i, packed[i], fresh[i])
					break
				}
			}
		}
	}
	v.tol = convert.Int8BoundTolerance
	scales, stats := rows.Result()
	if d := diffScales(stored, scales); d != "" {
		return d
	}
	if codes != "" {
		return codes
	}
	return diffStats(*e.Stats, stats)
}

// redoDType converts the source to the kept tensor's dtype again, a piece
// at a time, compares the bytes with the artifact's and returns what
// differs, or "".
func (b *redoBuffers) redoDType(a *pack.Artifact, t *pack.Tensor, raw []byte) string {
	e := t.Entry
	n := t.Len()
	size, _ := convert.DTypeSize(e.SourceDType)
	outSize, ok := convert.DTypeSize(e.DType)
	if !ok || e.Section.Length != int64(n)*int64(outSize) {
		return fmt.Sprintf("%s bytes at artifact byte %d differ from the converted source", e.DType, e.Section.Offset)
	}
	var cmp convert.Comparison
	var back []float32
	for start := 0; start < n || start == 0; start += pieceElements {
		end := min(n, start+pieceElements)
		w := grow(&b.weights, end-start)
		if err := convert.DecodeFloat32(e.SourceDType, raw[start*size:end*size], w); err != nil {
			return fmt.Sprintf("decode source: %v", err)
		}
		want, err := convert.EncodeFloat32(b.encoded[:0], e.DType, w)
		if err != nil {
			return err.Error()
		}
		b.encoded = want
		payload, err := b.readPiece(a, t, int64(start*outSize), int64(len(want)))
		if err != nil {
			return err.Error()
		}
		if !bytes.Equal(payload, want) {
			return fmt.Sprintf("%s bytes at artifact byte %d differ from the converted source", e.DType, e.Section.Offset)
		}
		back = grow(&back, end-start)
		if err := convert.DecodeFloat32(e.DType, want, back); err != nil {
			return err.Error()
		}
		cmp.Add(w, back)
		if end == n {
			break
		}
	}
	return diffStats(*e.Stats, cmp.Stats())
}
