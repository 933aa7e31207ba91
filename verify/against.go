package verify

import (
	"bytes"
	"fmt"
	"math"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// worstBound tracks the tensor that comes closest to breaking its bound:
// the largest excess over the bound beyond the kind's tolerance.
type worstBound struct {
	tensor            string
	index             int
	excess, tolerance float64
	seen              bool
}

func (w *worstBound) note(tensor string, excess, tolerance float64, index int) {
	if index >= 0 && (!w.seen || excess-tolerance > w.excess-w.tolerance) {
		*w = worstBound{tensor: tensor, index: index, excess: excess, tolerance: tolerance, seen: true}
	}
}

// tensorVerdict is what checking one source tensor found.
type tensorVerdict struct {
	checks      []Check
	name        string
	excess, tol float64
	at          int // element of the largest bound excess, -1 for none
	inArtifact  bool
}

// checkAgainst re-reads the source, redoes each tensor's recorded action
// with the recorded recipe and compares. Tensors are checked by workers in
// parallel; the checks are reported in source order.
func checkAgainst(rep *Report, a *pack.Artifact, src *convert.Source, workers int, advance func(n int64)) error {
	m := a.Manifest()
	derivedBad := checkDerived(rep, m, src)
	seen := make(map[string]bool, len(m.Tensors))
	var worst worstBound
	scratch := make([]redoBuffers, max(1, workers))
	gate := convert.NewGate(workers)
	for i := range scratch {
		scratch[i].workers, scratch[i].gate = workers, gate
	}
	record := func(st *convert.Tensor, v tensorVerdict) {
		for _, c := range v.checks {
			rep.add(c.Name, c.Tensor, c.OK, "%s", c.Detail)
		}
		if v.inArtifact {
			seen[st.Name] = true
		}
		worst.note(v.name, v.excess, v.tol, v.at)
	}
	// a large tensor the artifact keeps as it is is compared by its hash
	// alone: it comes in pieces, hashed as they come
	walk := convert.WalkOptions{Workers: workers, PieceSize: keptPieceSize,
		InPieces: func(st *convert.Tensor) bool {
			t, err := a.Tensor(st.Name)
			return err == nil && st.Length > keptPieceSize && st.DType == t.Entry.SourceDType &&
				t.Entry.Kind == manifest.KindKept && t.Entry.DType == t.Entry.SourceDType
		},
		Piece: func(st *convert.Tensor, _ int64, p []byte, sum *[32]byte) error {
			advance(int64(len(p)))
			if sum != nil {
				record(st, checkTensor(a, m.Recipe, st, nil, *sum, &redoBuffers{}, derivedBad[st.Name]))
			}
			return nil
		}}
	err := convert.WalkOrdered(src, walk,
		func(worker int, st *convert.Tensor, raw []byte, sum [32]byte) (tensorVerdict, error) {
			gate.Acquire()
			defer gate.Release()
			return checkTensor(a, m.Recipe, st, raw, sum, &scratch[worker], derivedBad[st.Name]), nil
		},
		func(st *convert.Tensor, v tensorVerdict) error {
			record(st, v)
			advance(st.Length)
			return nil
		})
	if err != nil {
		return err
	}
	for _, e := range m.Tensors {
		if !seen[e.Name] {
			rep.add(CheckSourceSet, e.Name, false, "artifact tensor %q is not in the source", e.Name)
		}
	}
	if worst.seen {
		ok := worst.excess <= worst.tolerance
		verdict := "holds"
		if !ok {
			verdict = "broken"
		}
		rep.add(CheckBound, "", ok, "per-element bound %s; closest to it: tensor %q element %d, error minus bound = %.3g × its scale (tolerance %g)",
			verdict, worst.tensor, worst.index, worst.excess, worst.tolerance)
	}
	checkSourceFiles(rep, m, src)
	return nil
}

// keptPieceSize is the piece a large source tensor the artifact keeps as
// it is comes in (a variable for tests).
var keptPieceSize int64 = convert.DefaultPieceSize

// checkTensor checks one source tensor against the artifact, with b the
// worker's scratch space. A tensor whose manifest entry differs from the
// source (skip) is not re-quantized: its entry's claims are not trusted to
// size buffers.
func checkTensor(a *pack.Artifact, r convert.Recipe, st *convert.Tensor, raw []byte, sum [32]byte, b *redoBuffers, skip bool) tensorVerdict {
	v := tensorVerdict{name: st.Name, at: -1}
	add := func(name string, ok bool, format string, args ...any) {
		c := Check{Name: name, Tensor: st.Name, OK: ok}
		if !ok {
			c.Detail = fmt.Sprintf(format, args...)
		}
		v.checks = append(v.checks, c)
	}
	t, err := a.Tensor(st.Name)
	if err != nil {
		add(CheckSourceSet, false, "source tensor %q (%s) is not in the artifact", st.Name, st.File)
		return v
	}
	v.inArtifact = true
	e := t.Entry
	if got := manifest.HexHash(sum); got != e.SourceBLAKE3 {
		add(CheckSourceHash, false, "source bytes at %s byte %d differ from those packed (BLAKE3 %s, manifest records %s)",
			st.File, st.Offset, got, e.SourceBLAKE3)
		return v
	}
	add(CheckSourceHash, true, "")
	if skip {
		return v
	}
	name := CheckRequantize
	if e.Kind == manifest.KindKept {
		name = CheckKept
	}
	detail := b.redo(a, t, r, st, raw, &v)
	add(name, detail == "", "%s", detail)
	return v
}

// redo repeats the tensor's action on the source bytes and returns what
// differs, or "". It records the tensor's bound excess in v.
func (b *redoBuffers) redo(a *pack.Artifact, t *pack.Tensor, r convert.Recipe, st *convert.Tensor, raw []byte, v *tensorVerdict) string {
	e := t.Entry
	if e.Kind == manifest.KindKept && e.DType == e.SourceDType {
		// The source bytes hash to source_blake3 (checked by the caller) and
		// the section's bytes to its BLAKE3 (checked with the sections): equal
		// hashes mean equal bytes, without reading the section again.
		if e.Section.BLAKE3 != e.SourceBLAKE3 {
			return fmt.Sprintf("kept section at artifact byte %d has BLAKE3 %s, the source tensor %s", e.Section.Offset, e.Section.BLAKE3, e.SourceBLAKE3)
		}
		return ""
	}
	n := t.Len()
	var ws convert.Weights
	var w []float32
	if e.Kind == manifest.KindTernary && e.SourceDType == "BF16" && st.DType == "BF16" && len(raw) == 2*n {
		ws = convert.BF16Weights(raw) // read in place by the kernels
	} else {
		w = grow(&b.weights, n)
		if err := convert.DecodeFloat32(e.SourceDType, raw, w); err != nil {
			return fmt.Sprintf("decode source: %v", err)
		}
		ws = convert.Float32Weights(w)
	}
	cols := convert.Columns(e.Shape)
	payload, err := b.readPayload(a, t)
	if err != nil {
		return err.Error()
	}
	switch e.Kind {
	case manifest.KindTernary:
		fresh, q, err := b.requantize(ws, cols, *e.Granularity, r, pack.Codec(e.Codec))
		if err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		packed, same, err := b.storedTrits(pack.Codec(e.Codec), payload, fresh)
		if err != nil {
			return fmt.Sprintf("section at byte %d: %v", e.Section.Offset, err)
		}
		scales, err := t.Scales()
		if err != nil {
			return err.Error()
		}
		v.excess, v.at = convert.TernaryBoundExcessSplit(ws, packed, scales, t.GroupSize(), convert.Split{Workers: b.workers, Gate: b.gate})
		v.tol = convert.TernaryBoundTolerance
		if d := diffScales(scales, q.Scales); d != "" {
			return d
		}
		if !same { // equal payload bytes: the trits are fresh itself
			if d := diffCodes("trit", packed, fresh); d != "" {
				return d
			}
		}
		if q.Exact != e.Exact {
			return fmt.Sprintf("exact is %v, re-quantizing the source gives %v", e.Exact, q.Exact)
		}
		return diffStats(*e.Stats, q.Stats)
	case manifest.KindInt8:
		fresh := grow(&b.fresh, n)
		scales, stats, err := convert.QuantizeInt8Rows(w, cols, fresh)
		if err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		packed := grow(&b.stored, n)
		clear(packed)
		for i, c := range payload[:min(len(payload), n)] {
			packed[i] = int8(c)
		}
		stored, err := t.Scales()
		if err != nil {
			return err.Error()
		}
		v.excess, v.at = convert.Int8BoundExcess(w, packed, stored, cols)
		v.tol = convert.Int8BoundTolerance
		if d := diffScales(stored, scales); d != "" {
			return d
		}
		if d := diffCodes("int8 code", packed, fresh); d != "" {
			return d
		}
		return diffStats(*e.Stats, stats)
	}
	// kept, converted to another float dtype
	want, err := convert.EncodeFloat32(b.encoded[:0], e.DType, w)
	if err != nil {
		return err.Error()
	}
	b.encoded = want
	if !bytes.Equal(payload, want) {
		return fmt.Sprintf("%s bytes at artifact byte %d differ from the converted source", e.DType, e.Section.Offset)
	}
	back := make([]float32, n)
	if err := convert.DecodeFloat32(e.DType, want, back); err != nil {
		return err.Error()
	}
	return diffStats(*e.Stats, convert.CompareFloat32(w, back))
}

func diffScales(stored, fresh []float32) string {
	if len(stored) != len(fresh) {
		return fmt.Sprintf("%d scales, re-quantizing the source gives %d", len(stored), len(fresh))
	}
	for i := range stored {
		if math.Float32bits(stored[i]) != math.Float32bits(fresh[i]) {
			return fmt.Sprintf("scale %d is %v, re-quantizing the source gives %v", i, stored[i], fresh[i])
		}
	}
	return ""
}

func diffCodes(what string, stored, fresh []int8) string {
	for i := range stored {
		if stored[i] != fresh[i] {
			return fmt.Sprintf("%s %d is %d, re-quantizing the source gives %d", what, i, stored[i], fresh[i])
		}
	}
	return ""
}

func diffStats(stored, fresh convert.Stats) string {
	if stored != fresh {
		return fmt.Sprintf("statistics %+v, re-quantizing the source gives %+v", stored, fresh)
	}
	return ""
}

func checkSourceFiles(rep *Report, m *manifest.Manifest, src *convert.Source) {
	files := m.Source.Files
	if len(files) != len(src.Files) {
		rep.add(CheckSourceFile, "", false, "source has %d files, manifest records %d", len(src.Files), len(files))
		return
	}
	for i, f := range src.Files {
		if got := manifest.HexHash(f.BLAKE3); got != files[i].BLAKE3 || f.Size != files[i].Bytes {
			rep.add(CheckSourceFile, "", false, "%s: %d bytes BLAKE3 %s, manifest records %s: %d bytes BLAKE3 %s",
				f.Path, f.Size, got, files[i].Name, files[i].Bytes, files[i].BLAKE3)
		} else {
			rep.add(CheckSourceFile, "", true, "")
		}
	}
}
