// Package verify checks a ternkit artifact: its structure and every hash,
// every trit payload, and, given the source checkpoint, that re-quantizing
// the source with the recorded recipe gives the same trits and scales and
// that kept tensors hold the source bytes.
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
	CheckDecode     = "decode"       // trit payload decodes and matches its counts
	CheckSourceFile = "source_file"  // source files match the provenance
	CheckSourceSet  = "source_set"   // source and artifact hold the same tensors
	CheckSourceHash = "source_hash"  // a source tensor's bytes match the recorded hash
	CheckRequantize = "requantize"   // trits, scale and statistics match a fresh run
	CheckKept       = "kept_bytes"   // a kept tensor equals its source bytes
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
// decodes every trit payload against its recorded counts.
func checkSections(rep *Report, a *pack.Artifact) {
	ra := a.ReaderAt()
	m := a.Manifest()
	padFail := 0
	for i, e := range m.Tensors {
		t, _ := a.Tensor(e.Name)
		p, err := t.Payload()
		if err != nil {
			rep.add(CheckSection, e.Name, false, "%v", err)
			continue
		}
		if got := manifest.HexHash(blake3.Sum256(p)); got != e.Section.BLAKE3 {
			rep.add(CheckSection, e.Name, false, "section at byte %d (%d bytes): BLAKE3 %s, manifest records %s",
				e.Section.Offset, e.Section.Length, got, e.Section.BLAKE3)
		} else {
			rep.add(CheckSection, e.Name, true, "")
		}
		end := e.Section.Offset + e.Section.Length
		next := a.ManifestOffset()
		if i+1 < len(m.Tensors) {
			next = m.Tensors[i+1].Section.Offset
		}
		if gap := next - end; gap > 0 {
			pad := make([]byte, gap)
			if _, err := ra.ReadAt(pad, end); err != nil || !allZero(pad) {
				rep.add(CheckPadding, e.Name, false, "padding after section at byte %d..%d is not zero", end, next)
				padFail++
			}
		}
		if e.Kind == manifest.KindTernary {
			checkDecode(rep, t, p)
		}
	}
	if padFail == 0 {
		rep.add(CheckPadding, "", true, "")
	}
}

func checkDecode(rep *Report, t *pack.Tensor, payload []byte) {
	e := t.Entry
	trits := make([]int8, t.Len())
	if err := pack.Codec(e.Codec).Decode(trits, payload); err != nil {
		rep.add(CheckDecode, e.Name, false, "section at byte %d: %v", e.Section.Offset, err)
		return
	}
	got := countTrits(trits)
	if got != *e.Trits {
		rep.add(CheckDecode, e.Name, false, "trit counts %+v, manifest records %+v", got, *e.Trits)
		return
	}
	rep.add(CheckDecode, e.Name, true, "")
}

func countTrits(trits []int8) convert.TritCounts {
	var c convert.TritCounts
	for _, v := range trits {
		switch v {
		case 1:
			c.Pos++
		case -1:
			c.Neg++
		default:
			c.Zero++
		}
	}
	return c
}

func allZero(p []byte) bool {
	for _, b := range p {
		if b != 0 {
			return false
		}
	}
	return true
}

// checkAgainst re-reads the source, re-quantizes it with the recorded
// recipe and compares.
func checkAgainst(rep *Report, a *pack.Artifact, src *convert.Source) error {
	m := a.Manifest()
	seen := make(map[string]bool, len(m.Tensors))
	var (
		floats []float32
		fresh  []int8
		packed []int8
	)
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
		if e.Kind == manifest.KindKept {
			p, err := t.Payload()
			if err != nil || !bytes.Equal(p, raw) {
				rep.add(CheckKept, e.Name, false, "kept bytes at artifact byte %d differ from the source", e.Section.Offset)
			} else {
				rep.add(CheckKept, e.Name, true, "")
			}
			return nil
		}
		n := t.Len()
		floats, fresh, packed = grow(floats, n), grow(fresh, n), grow(packed, n)
		if err := convert.DecodeFloat32(st.DType, raw, floats); err != nil {
			rep.add(CheckRequantize, e.Name, false, "decode source: %v", err)
			return nil
		}
		q, err := convert.Ternarize(floats, m.Recipe, fresh)
		if err != nil {
			rep.add(CheckRequantize, e.Name, false, "re-quantize: %v", err)
			return nil
		}
		if err := t.DecodeTrits(packed); err != nil {
			rep.add(CheckRequantize, e.Name, false, "decode artifact: %v", err)
			return nil
		}
		if detail := compareTernary(e, q, fresh, packed); detail != "" {
			rep.add(CheckRequantize, e.Name, false, "%s", detail)
		} else {
			rep.add(CheckRequantize, e.Name, true, "")
		}
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
	files := m.Source.Files
	if len(files) != len(src.Files) {
		rep.add(CheckSourceFile, "", false, "source has %d files, manifest records %d", len(src.Files), len(files))
		return nil
	}
	for i, f := range src.Files {
		if got := manifest.HexHash(f.BLAKE3); got != files[i].BLAKE3 || f.Size != files[i].Bytes {
			rep.add(CheckSourceFile, "", false, "%s: %d bytes BLAKE3 %s, manifest records %s: %d bytes BLAKE3 %s",
				f.Path, f.Size, got, files[i].Name, files[i].Bytes, files[i].BLAKE3)
		} else {
			rep.add(CheckSourceFile, "", true, "")
		}
	}
	return nil
}

// compareTernary returns what differs between a packed tensor and a fresh
// quantization of its source, or "".
func compareTernary(e manifest.Tensor, q convert.Ternary, fresh, packed []int8) string {
	switch {
	case math.Float32bits(q.Scale) != math.Float32bits(e.Scale):
		return fmt.Sprintf("scale %v, re-quantizing the source gives %v", e.Scale, q.Scale)
	case q.Counts != *e.Trits:
		return fmt.Sprintf("trit counts %+v, re-quantizing the source gives %+v", *e.Trits, q.Counts)
	}
	for i := range fresh {
		if fresh[i] != packed[i] {
			return fmt.Sprintf("trit %d is %d, re-quantizing the source gives %d", i, packed[i], fresh[i])
		}
	}
	if q.RelRMSE != *e.RelRMSE || q.MaxAbsErr != *e.MaxAbsErr {
		return fmt.Sprintf("statistics rel_rmse %v max_abs_err %v, re-quantizing the source gives %v %v",
			*e.RelRMSE, *e.MaxAbsErr, q.RelRMSE, q.MaxAbsErr)
	}
	return ""
}

func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}
