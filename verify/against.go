package verify

import (
	"bytes"
	"fmt"
	"math"

	"github.com/zeebo/blake3"

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
	span        string // the source span identity recorded, to check at emit
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
	// a large tensor the artifact keeps as it is comes in pieces, compared
	// with the section's bytes (format 1.4) or hashed (older) as they come
	var pieceDetail string
	var pieceBuf redoBuffers
	inPieces := func(st *convert.Tensor) bool {
		t, err := a.Tensor(st.Name)
		return err == nil && st.Length > keptPieceSize && st.DType == t.Entry.SourceDType &&
			t.Entry.Kind == manifest.KindKept && t.Entry.DType == t.Entry.SourceDType
	}
	walk := convert.WalkOptions{Workers: workers,
		InPieces: inPieces,
		// formats 1.0 to 1.3 record the BLAKE3 of the bytes: the workers
		// hash those of a tensor in pieces
		Plain: func(st *convert.Tensor) bool {
			t, err := a.Tensor(st.Name)
			return inPieces(st) && err == nil && t.Entry.SourceSpan == ""
		},
		Piece: func(st *convert.Tensor, off int64, p []byte, id *convert.SourceID) error {
			t, err := a.Tensor(st.Name)
			if err != nil {
				return err
			}
			if off == 0 {
				pieceDetail = ""
			}
			if t.Entry.SourceSpan != "" && pieceDetail == "" {
				pieceDetail = pieceBuf.compareKept(a, t, st, p, off)
			}
			advance(int64(len(p)))
			if id != nil {
				v := checkTensor(a, m.Recipe, st, nil, id.Plain, &redoBuffers{}, derivedBad[st.Name], &pieceDetail)
				record(st, settle(v, st, *id))
			}
			return nil
		}}
	err := convert.WalkOrdered(src, walk,
		func(worker int, st *convert.Tensor, raw []byte) (tensorVerdict, error) {
			gate.Acquire()
			defer gate.Release()
			return checkTensor(a, m.Recipe, st, raw, nil, &scratch[worker], derivedBad[st.Name], nil), nil
		},
		func(st *convert.Tensor, id convert.SourceID, v tensorVerdict) error {
			record(st, settle(v, st, id))
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
// worker's scratch space; plain is the BLAKE3 of raw when it is known (nil
// to have it computed where needed), and kept what comparing a tensor that
// came in pieces with its kept section found ("" for equal; nil when it
// came whole). A tensor whose manifest entry differs
// from the source (skip) is not re-quantized: its entry's claims are not
// trusted to size buffers. An entry that records the source by its span
// identity (format 1.4) is checked against it by settle, once the walk
// has joined it; older entries are checked by the BLAKE3 of the bytes.
func checkTensor(a *pack.Artifact, r convert.Recipe, st *convert.Tensor, raw []byte, plain *[32]byte, b *redoBuffers, skip bool, kept *string) tensorVerdict {
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
	sum := func() [32]byte {
		if plain == nil {
			plain = new([32]byte)
			*plain = blake3.Sum256(raw)
		}
		return *plain
	}
	if e.SourceSpan != "" {
		v.span = e.SourceSpan
	} else if got := manifest.HexHash(sum()); got != e.SourceBLAKE3 {
		add(CheckSourceHash, false, "source bytes at %s byte %d differ from those packed (BLAKE3 %s, manifest records %s)",
			st.File, st.Offset, got, e.SourceBLAKE3)
		return v
	} else {
		add(CheckSourceHash, true, "")
	}
	if skip {
		return v
	}
	name := CheckRequantize
	if e.Kind == manifest.KindKept {
		name = CheckKept
	}
	var detail string
	switch {
	case e.Kind == manifest.KindKept && e.DType == e.SourceDType && e.SourceSpan != "":
		// format 1.4: the source bytes are compared with the section's
		// (whose hashes the integrity checks hold)
		if kept != nil {
			detail = *kept
		} else {
			detail = b.compareKept(a, t, st, raw, 0)
		}
	case e.Kind == manifest.KindKept && e.DType == e.SourceDType:
		// The section's bytes hash to its BLAKE3 (checked with the
		// sections): equal hashes mean equal bytes, without reading the
		// section again.
		if got := manifest.HexHash(sum()); got != e.Section.BLAKE3 {
			detail = fmt.Sprintf("kept section at artifact byte %d has BLAKE3 %s, the source tensor %s", e.Section.Offset, e.Section.BLAKE3, got)
		}
	default:
		detail = b.redo(a, t, r, st, raw, &v)
	}
	add(name, detail == "", "%s", detail)
	return v
}

// compareKept compares p, the source tensor st's bytes from offset off in
// it, with the same bytes of t's kept section, and returns what differs,
// or "".
func (b *redoBuffers) compareKept(a *pack.Artifact, t *pack.Tensor, st *convert.Tensor, p []byte, off int64) string {
	s := t.Entry.Section
	if s.Length != st.Length {
		return fmt.Sprintf("kept section at artifact byte %d holds %d bytes, the source tensor %d", s.Offset, s.Length, st.Length)
	}
	got := grow(&b.payload, len(p))
	if _, err := a.ReaderAt().ReadAt(got, s.Offset+off); err != nil {
		return fmt.Sprintf("kept section at artifact byte %d: %v", s.Offset+off, err)
	}
	if bytes.Equal(got, p) {
		return ""
	}
	i := 0
	for got[i] == p[i] {
		i++
	}
	return fmt.Sprintf("kept section at artifact byte %d (its byte %d) is 0x%02x, the source's is 0x%02x", s.Offset+off+int64(i), off+int64(i), got[i], p[i])
}

// settle checks the source span identity the walk joined for st against
// the one its entry records (format 1.4): when they differ, the source is
// not what was packed and what the redo found is left out.
func settle(v tensorVerdict, st *convert.Tensor, id convert.SourceID) tensorVerdict {
	if v.span == "" {
		return v
	}
	check := Check{Name: CheckSourceHash, Tensor: st.Name, OK: true}
	if got := manifest.HexHash(id.Span); got != v.span {
		check.OK = false
		check.Detail = fmt.Sprintf("source bytes or place at %s bytes %d to %d differ from those packed (source span %s, manifest records %s)",
			st.File, st.Offset, st.Offset+st.Length, got, v.span)
		v.checks = []Check{check}
		v.excess, v.tol, v.at = 0, 0, -1
		return v
	}
	v.checks = append([]Check{check}, v.checks...)
	return v
}

// redo repeats the tensor's action on the source bytes and returns what
// differs, or "". It records the tensor's bound excess in v.
func (b *redoBuffers) redo(a *pack.Artifact, t *pack.Tensor, r convert.Recipe, st *convert.Tensor, raw []byte, v *tensorVerdict) string {
	e := t.Entry
	n := t.Len()
	switch e.Kind {
	case manifest.KindInt8:
		return b.redoInt8(a, t, raw, v)
	case manifest.KindKept:
		return b.redoDType(a, t, raw)
	}
	var ws convert.Weights
	var w []float32
	if e.SourceDType == "BF16" && st.DType == "BF16" && len(raw) == 2*n {
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
	// the bound of the stored scales is checked on the fresh trits as
	// they come; it holds for the stored trits when those are fresh.
	// The fresh trits themselves are kept only when the payload may
	// differ from them: the entropy codec, or bytes that differ (then
	// the source is quantized again, keeping them, to name the trit)
	codec := pack.Codec(e.Codec)
	b.bound = nil
	if scales, err := t.Scales(); err == nil {
		b.bound = convert.NewBoundTracker(ws, scales, t.GroupSize())
	}
	b.dropFresh = b.bound != nil && (codec == pack.Bits2 || codec == pack.Base3)
	fresh, q, err := b.requantize(ws, cols, *e.Granularity, r, codec)
	bound := b.bound
	b.bound, b.dropFresh = nil, false
	if err == nil && fresh == nil && !b.sameEncoded(codec, payload) {
		bound = nil
		fresh, q, err = b.requantize(ws, cols, *e.Granularity, r, codec)
	}
	if err != nil {
		return fmt.Sprintf("re-quantize: %v", err)
	}
	packed, same, err := b.storedTrits(codec, payload, fresh)
	if err != nil {
		return fmt.Sprintf("section at byte %d: %v", e.Section.Offset, err)
	}
	scales, err := t.Scales()
	if err != nil {
		return err.Error()
	}
	ok := false
	if same && bound != nil {
		v.excess, v.at, ok = bound.Result()
	}
	if !ok && packed == nil { // the tracker missed some: quantize again, keeping the trits
		fresh, q, err = b.requantize(ws, cols, *e.Granularity, r, codec)
		if err != nil {
			return fmt.Sprintf("re-quantize: %v", err)
		}
		packed = fresh
	}
	if !ok {
		v.excess, v.at = convert.TernaryBoundExcessSplit(ws, packed, scales, t.GroupSize(), convert.Split{Workers: b.workers, Gate: b.gate})
	}
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
