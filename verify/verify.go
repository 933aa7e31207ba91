// Package verify checks a ternkit artifact: its structure and every hash,
// every trit payload and scale, and, given the source checkpoint, that
// redoing each tensor's recorded action with the recorded recipe gives the
// same bytes, scales and statistics, and that the per-element error bound
// holds.
//
// A passing verification proves bytes and bounds, not task quality.
package verify

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"math"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// Check names, as they appear in reports.
const (
	CheckStructure  = "structure"    // preamble, trailer, manifest hash and rules, layout
	CheckSection    = "section_hash" // a section's BLAKE3
	CheckPadding    = "padding"      // zero bytes between sections
	CheckDecode     = "decode"       // payload decodes, counts match, scales are valid
	CheckSourceFile = "source_file"  // source files match the provenance
	CheckSourceSet  = "source_set"   // source and artifact hold the same tensors
	CheckSourceHash = "source_hash"  // a source tensor's bytes match the recorded hash
	CheckRequantize = "requantize"   // codes, scales and statistics match a fresh run
	CheckKept       = "kept_bytes"   // a kept tensor equals its (converted) source bytes
	CheckBound      = "bound"        // the per-element error bound, worst tensor named
)

// Check is one verification step's outcome.
type Check struct {
	Name   string `json:"check"`
	Tensor string `json:"tensor,omitempty"`
	OK     bool   `json:"ok"`
	Detail string `json:"detail,omitempty"`
}

// Report is the outcome of a verification.
type Report struct {
	Artifact string  `json:"artifact"`
	Source   string  `json:"source,omitempty"`
	Checks   []Check `json:"checks"`
	Passed   int     `json:"passed"`
	Failed   int     `json:"failed"`
}

// OK reports whether every check passed.
func (r *Report) OK() bool { return r.Failed == 0 && r.Passed > 0 }

// Failures lists the failed checks.
func (r *Report) Failures() []Check {
	var out []Check
	for _, c := range r.Checks {
		if !c.OK {
			out = append(out, c)
		}
	}
	return out
}

// Find returns the first check with the given name and tensor.
func (r *Report) Find(name, tensor string) (Check, bool) {
	for _, c := range r.Checks {
		if c.Name == name && c.Tensor == tensor {
			return c, true
		}
	}
	return Check{}, false
}

func (r *Report) add(name, tensor string, ok bool, format string, args ...any) {
	c := Check{Name: name, Tensor: tensor, OK: ok}
	if format != "" {
		c.Detail = fmt.Sprintf(format, args...)
	}
	r.Checks = append(r.Checks, c)
	if ok {
		r.Passed++
	} else {
		r.Failed++
	}
}

// Options control Run.
type Options struct {
	// Source, when set, is the checkpoint the artifact claims to come from.
	Source *convert.Source
}

// Run verifies the artifact at path. It returns an error only when the
// artifact or the source cannot be read at all (missing file, permission,
// malformed source); everything wrong inside the artifact is a failed
// check in the report.
func Run(path string, opts Options) (*Report, error) {
	rep := &Report{Artifact: path}
	a, err := pack.Open(path)
	if err != nil {
		var fe *pack.FormatError
		if errors.As(err, &fe) {
			rep.add(CheckStructure, "", false, "%v", err)
			return rep, nil
		}
		if errors.Is(err, fs.ErrNotExist) || errors.Is(err, fs.ErrPermission) {
			return nil, err
		}
		return nil, fmt.Errorf("open %s: %w", path, err)
	}
	defer a.Close()
	rep.add(CheckStructure, "", true, "")
	checkSections(rep, a)
	if opts.Source != nil {
		rep.Source = opts.Source.Path
		if err := checkAgainst(rep, a, opts.Source); err != nil {
			return nil, err
		}
	}
	return rep, nil
}

// checkSections hashes every section, checks the padding after it, and
// decodes every payload against its recorded counts and scales.
func checkSections(rep *Report, a *pack.Artifact) {
	ra := a.ReaderAt()
	m := a.Manifest()
	var all []manifest.Section
	var owner []string
	for _, e := range m.Tensors {
		for _, s := range e.Sections() {
			all = append(all, s)
			owner = append(owner, e.Name)
		}
	}
	padFail := 0
	for i, s := range all {
		p := make([]byte, s.Length)
		if _, err := ra.ReadAt(p, s.Offset); err != nil {
			rep.add(CheckSection, owner[i], false, "read section at byte %d: %v", s.Offset, err)
			continue
		}
		if got := manifest.HexHash(blake3.Sum256(p)); got != s.BLAKE3 {
			rep.add(CheckSection, owner[i], false, "section at byte %d (%d bytes): BLAKE3 %s, manifest records %s",
				s.Offset, s.Length, got, s.BLAKE3)
		} else {
			rep.add(CheckSection, owner[i], true, "")
		}
		end, next := s.Offset+s.Length, a.ManifestOffset()
		if i+1 < len(all) {
			next = all[i+1].Offset
		}
		if gap := next - end; gap > 0 {
			pad := make([]byte, gap)
			if _, err := ra.ReadAt(pad, end); err != nil || !allZero(pad) {
				rep.add(CheckPadding, owner[i], false, "padding at byte %d..%d is not zero", end, next)
				padFail++
			}
		}
	}
	if padFail == 0 {
		rep.add(CheckPadding, "", true, "")
	}
	for _, e := range m.Tensors {
		if e.Kind == manifest.KindKept {
			continue
		}
		t, _ := a.Tensor(e.Name)
		if detail := decodeDetail(t); detail != "" {
			rep.add(CheckDecode, e.Name, false, "%s", detail)
		} else {
			rep.add(CheckDecode, e.Name, true, "")
		}
	}
}

// decodeDetail decodes a ternary or int8 tensor and says what is wrong
// with its codes or scales, or "".
func decodeDetail(t *pack.Tensor) string {
	e := t.Entry
	if e.Kind == manifest.KindTernary {
		trits := make([]int8, t.Len())
		if err := t.DecodeTrits(trits); err != nil {
			return err.Error()
		}
		var got convert.TritCounts
		got.Count(trits)
		if got != *e.Trits {
			return fmt.Sprintf("trit counts %+v, manifest records %+v", got, *e.Trits)
		}
	}
	scales, err := t.Scales()
	if err != nil {
		return err.Error()
	}
	for i, s := range scales {
		f := float64(s)
		if math.IsNaN(f) || math.IsInf(f, 0) || s < 0 || (s == 0 && e.Kind == manifest.KindTernary) {
			return fmt.Sprintf("scale %d is %v", i, s)
		}
	}
	return ""
}

func allZero(p []byte) bool {
	for _, b := range p {
		if b != 0 {
			return false
		}
	}
	return true
}

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
func checkAgainst(rep *Report, a *pack.Artifact, src *convert.Source) error {
	m := a.Manifest()
	seen := make(map[string]bool, len(m.Tensors))
	var worst worstBound
	err := src.Walk(func(st *convert.Tensor, raw []byte, sum [32]byte) error {
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
