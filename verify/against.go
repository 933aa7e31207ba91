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

// checkAgainst re-reads the source, redoes each tensor's recorded action
// with the recorded recipe and compares.
func checkAgainst(rep *Report, a *pack.Artifact, src *convert.Source, advance func(n int64)) error {
	m := a.Manifest()
	seen := make(map[string]bool, len(m.Tensors))
	var worst worstBound
	err := src.Walk(func(st *convert.Tensor, raw []byte, sum [32]byte) error {
		defer advance(st.Length)
		t, err := a.Tensor(st.Name)
		if err != nil {
			rep.add(CheckSourceSet, st.Name, false, "source tensor %q (%s) is not in the artifact", st.Name, st.File)
			return nil
		}
		seen[st.Name] = true
		e := t.Entry
		if got := manifest.HexHash(sum); got != e.SourceBLAKE3 {
			rep.add(CheckSourceHash, e.Name, false, "source bytes at %s byte %d differ from those packed (BLAKE3 %s, manifest records %s)",
				st.File, st.Offset, got, e.SourceBLAKE3)
			return nil
		}
		rep.add(CheckSourceHash, e.Name, true, "")
		name := CheckRequantize
		if e.Kind == manifest.KindKept {
			name = CheckKept
		}
		detail := redo(t, m.Recipe, raw, &worst)
		rep.add(name, e.Name, detail == "", "%s", detail)
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
		rep.add(CheckBound, "", ok, "per-element bound %s; worst tensor %q element %d: %.3g of its scale beyond the bound (tolerance %g)",
			verdict, worst.tensor, worst.index, worst.excess, worst.tolerance)
	}
	checkSourceFiles(rep, m, src)
	return nil
}

// redo repeats the tensor's action on the source bytes and returns what
// differs, or "". It records the tensor's bound excess in worst.
func redo(t *pack.Tensor, r convert.Recipe, raw []byte, worst *worstBound) string {
	e := t.Entry
	if e.Kind == manifest.KindKept && e.DType == e.SourceDType {
		p, err := t.Payload()
		if err != nil {
			return err.Error()
		}
		if !bytes.Equal(p, raw) {
			return fmt.Sprintf("kept bytes at artifact byte %d differ from the source", e.Section.Offset)
		}
		return ""
	}
	n := t.Len()
	w := make([]float32, n)
	if err := convert.DecodeFloat32(e.SourceDType, raw, w); err != nil {
		return fmt.Sprintf("decode source: %v", err)
	}
	cols := convert.Columns(e.Shape)
	payload, err := t.Payload()
	if err != nil {
		return err.Error()
	}
	switch e.Kind {
	case manifest.KindTernary:
		fresh := make([]int8, n)
		q, err := convert.Ternarize(w, cols, *e.Granularity, r, fresh)
		if err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		packed := make([]int8, n)
		if err := t.DecodeTrits(packed); err != nil {
			return err.Error()
		}
		scales, err := t.Scales()
		if err != nil {
			return err.Error()
		}
		excess, at := convert.TernaryBoundExcess(w, packed, scales, t.GroupSize())
		worst.note(e.Name, excess, convert.TernaryBoundTolerance, at)
		if d := diffScales(scales, q.Scales); d != "" {
			return d
		}
		if d := diffCodes("trit", packed, fresh); d != "" {
			return d
		}
		if q.Exact != e.Exact {
			return fmt.Sprintf("exact is %v, re-quantizing the source gives %v", e.Exact, q.Exact)
		}
		return diffStats(*e.Stats, q.Stats)
	case manifest.KindInt8:
		fresh := make([]int8, n)
		scales, stats, err := convert.QuantizeInt8Rows(w, cols, fresh)
		if err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		packed := make([]int8, n)
		for i, b := range payload {
			packed[i] = int8(b)
		}
		stored, err := t.Scales()
		if err != nil {
			return err.Error()
		}
		excess, at := convert.Int8BoundExcess(w, packed, stored, cols)
		worst.note(e.Name, excess, convert.Int8BoundTolerance, at)
		if d := diffScales(stored, scales); d != "" {
			return d
		}
		if d := diffCodes("int8 code", packed, fresh); d != "" {
			return d
		}
		return diffStats(*e.Stats, stats)
	}
	// kept, converted to another float dtype
	want, err := convert.EncodeFloat32(nil, e.DType, w)
	if err != nil {
		return err.Error()
	}
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
