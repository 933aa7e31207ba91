package verify

import (
	"encoding/hex"
	"fmt"
	"io"
	"math"

	"github.com/zeebo/blake3"

	"ternkit/manifest"
	"ternkit/pack"
)

// checkSections streams every section in pieces of manifest.ChunkSize:
// hashes it whole and piece by piece, checks the zero padding after it,
// and checks trit payloads (codes, padding, counts), int8 codes and scales.
// Memory stays at one piece, whatever the artifact's size.
func checkSections(rep *Report, a *pack.Artifact, advance func(n int64)) {
	ra := a.ReaderAt()
	m := a.Manifest()
	type placed struct {
		s     manifest.Section
		owner *manifest.Tensor
		kind  string // "payload" or "scales"
	}
	var all []placed
	for i := range m.Tensors {
		e := &m.Tensors[i]
		all = append(all, placed{e.Section, e, "payload"})
		if e.Scales != nil {
			all = append(all, placed{*e.Scales, e, "scales"})
		}
	}
	buf := make([]byte, min(manifest.ChunkSize, maxLength(m)))
	padFail := 0
	for i, p := range all {
		e := p.owner
		var sink io.Writer
		var counter *pack.TritCounter
		var scales *scaleChecker
		switch {
		case p.kind == "scales":
			scales = &scaleChecker{ternary: e.Kind == manifest.KindTernary, bad: -1}
			sink = scales
		case e.Kind == manifest.KindTernary:
			c, err := pack.NewTritCounter(pack.Codec(e.Codec), manifest.NumElements(e.Shape))
			if err != nil { // the manifest's rules admit only known codecs
				rep.add(CheckDecode, e.Name, false, "%v", err)
			} else {
				counter, sink = c, c
			}
		case e.Kind == manifest.KindInt8:
			sink = &int8Checker{bad: -1}
		}
		hashOK, detail := streamSection(ra, p.s, buf, sink)
		advance(p.s.Length)
		rep.add(CheckSection, e.Name, hashOK, "%s", detail)

		end, next := p.s.Offset+p.s.Length, a.ManifestOffset()
		if i+1 < len(all) {
			next = all[i+1].s.Offset
		}
		if gap := next - end; gap > 0 {
			pad := make([]byte, gap)
			if _, err := ra.ReadAt(pad, end); err != nil || firstNonZero(pad) >= 0 {
				rep.add(CheckPadding, e.Name, false, "padding at byte %d..%d is not zero", end, next)
				padFail++
			}
		}
		if !hashOK {
			continue // the decode would only repeat the hash's verdict
		}
		switch {
		case counter != nil:
			got, err := counter.Close()
			switch {
			case err != nil:
				rep.add(CheckDecode, e.Name, false, "section at byte %d: %v", p.s.Offset, err)
			case got != *e.Trits:
				rep.add(CheckDecode, e.Name, false, "trit counts %+v, manifest records %+v", got, *e.Trits)
			default:
				rep.add(CheckDecode, e.Name, true, "")
			}
		case scales != nil:
			rep.add(CheckDecode, e.Name, scales.bad < 0, "scales at byte %d: scale %d is %v", p.s.Offset, scales.bad, scales.badValue)
		case sink != nil:
			ic := sink.(*int8Checker)
			rep.add(CheckDecode, e.Name, ic.bad < 0, "int8 payload byte %d is -128 (codes are -127..127)", ic.bad)
		}
	}
	if padFail == 0 {
		rep.add(CheckPadding, "", true, "")
	}
}

func maxLength(m *manifest.Manifest) int64 {
	var n int64 = 1
	for _, e := range m.Tensors {
		for _, s := range e.Sections() {
			n = max(n, s.Length)
		}
	}
	return n
}

// streamSection reads section s piece by piece into buf, feeding sink, and
// compares the whole hash and the piece hashes. It returns whether the
// section is intact, and a detail naming the first bad piece otherwise.
func streamSection(ra io.ReaderAt, s manifest.Section, buf []byte, sink io.Writer) (bool, string) {
	h := blake3.New()
	badChunk := int64(-1)
	var sinkErr error
	for off, k := int64(0), 0; off < s.Length; off, k = off+manifest.ChunkSize, k+1 {
		n := min(manifest.ChunkSize, s.Length-off)
		piece := buf[:n]
		if _, err := ra.ReadAt(piece, s.Offset+off); err != nil {
			return false, fmt.Sprintf("read section at byte %d: %v", s.Offset+off, err)
		}
		h.Write(piece)
		if len(s.Chunks) > 0 && badChunk < 0 {
			sum := blake3.Sum256(piece)
			if hex.EncodeToString(sum[:]) != s.Chunks[k] {
				badChunk = s.Offset + off
			}
		}
		if sink != nil && sinkErr == nil {
			_, sinkErr = sink.Write(piece)
		}
	}
	var sum [32]byte
	h.Sum(sum[:0])
	if got := manifest.HexHash(sum); got != s.BLAKE3 {
		detail := fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s", s.Offset, s.Length, got, s.BLAKE3)
		if badChunk >= 0 {
			detail += fmt.Sprintf("; first bad chunk at byte %d", badChunk)
		}
		return false, detail
	}
	if badChunk >= 0 {
		return false, fmt.Sprintf("section at byte %d: chunk at byte %d does not match its recorded BLAKE3", s.Offset, badChunk)
	}
	return true, ""
}

// scaleChecker checks little-endian float32 scales as they stream by:
// finite, and > 0 for ternary tensors (≥ 0 for int8, whose all-zero rows
// have scale 0).
type scaleChecker struct {
	ternary  bool
	n        int
	partial  []byte
	bad      int // first bad scale, -1 for none
	badValue float32
}

func (c *scaleChecker) Write(p []byte) (int, error) {
	data := append(c.partial, p...)
	for len(data) >= 4 {
		v := math.Float32frombits(uint32(data[0]) | uint32(data[1])<<8 | uint32(data[2])<<16 | uint32(data[3])<<24)
		f := float64(v)
		if c.bad < 0 && (math.IsNaN(f) || math.IsInf(f, 0) || v < 0 || (v == 0 && c.ternary)) {
			c.bad, c.badValue = c.n, v
		}
		c.n++
		data = data[4:]
	}
	c.partial = append(c.partial[:0], data...)
	return len(p), nil
}

// int8Checker finds the first -128 in an int8 payload: codes are clamped
// to -127..127.
type int8Checker struct {
	n   int64
	bad int64 // first -128, -1 for none
}

func (c *int8Checker) Write(p []byte) (int, error) {
	for i, b := range p {
		if b == 0x80 && c.bad < 0 {
			c.bad = c.n + int64(i)
		}
	}
	c.n += int64(len(p))
	return len(p), nil
}

func firstNonZero(p []byte) int {
	for i, b := range p {
		if b != 0 {
			return i
		}
	}
	return -1
}
