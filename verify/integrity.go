package verify

import (
	"bytes"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"io"
	"math"
	"sync"
	"sync/atomic"

	"github.com/zeebo/blake3"

	"ternkit/manifest"
	"ternkit/pack"
)

// placedSection is one section of the artifact and the tensor it belongs to.
type placedSection struct {
	s      manifest.Section
	owner  *manifest.Tensor
	scales bool // the scales section, not the payload
}

// checkSections streams every section in pieces of manifest.ChunkSize:
// hashes it, checks the zero padding after it, and checks trit payloads
// (codes, padding, counts), int8 codes and scales. Sections are checked by
// workers in parallel, each holding one piece; the checks are reported in
// file order.
func checkSections(rep *Report, a *pack.Artifact, workers int, advance func(n int64)) {
	m := a.Manifest()
	var all []placedSection
	for i := range m.Tensors {
		e := &m.Tensors[i]
		all = append(all, placedSection{e.Section, e, false})
		if e.Scales != nil {
			all = append(all, placedSection{*e.Scales, e, true})
		}
	}
	pieceLen := min(manifest.ChunkSize, maxLength(m))
	bufs := make([][]byte, workers)
	results := inParallel(len(all), workers, func(worker, i int) []Check {
		if bufs[worker] == nil {
			bufs[worker] = make([]byte, pieceLen)
		}
		next := a.ManifestOffset()
		if i+1 < len(all) {
			next = all[i+1].s.Offset
		}
		return checkSection(a.ReaderAt(), all[i], next, bufs[worker])
	})
	padFail := 0
	for i, checks := range results {
		for _, c := range checks {
			rep.add(c.Name, c.Tensor, c.OK, "%s", c.Detail)
			if c.Name == CheckPadding {
				padFail++
			}
		}
		advance(all[i].s.Length)
	}
	if padFail == 0 {
		rep.add(CheckPadding, "", true, "")
	}
}

// checkSection checks one section and the padding up to next.
func checkSection(ra io.ReaderAt, p placedSection, next int64, buf []byte) []Check {
	e := p.owner
	var out []Check
	add := func(name string, ok bool, format string, args ...any) {
		c := Check{Name: name, Tensor: e.Name, OK: ok}
		if !ok {
			c.Detail = fmt.Sprintf(format, args...)
		}
		out = append(out, c)
	}
	var sink io.Writer
	var counter *pack.TritCounter
	var scales *scaleChecker
	var int8s *int8Checker
	switch {
	case p.scales:
		scales = &scaleChecker{ternary: e.Kind == manifest.KindTernary, bad: -1}
		sink = scales
	case e.Kind == manifest.KindTernary:
		c, err := pack.NewTritCounter(pack.Codec(e.Codec), manifest.NumElements(e.Shape))
		if err != nil { // the manifest's rules admit only known codecs
			add(CheckDecode, false, "%v", err)
		} else {
			counter, sink = c, c
		}
	case e.Kind == manifest.KindInt8:
		int8s = &int8Checker{bad: -1}
		sink = int8s
	}
	hashOK, detail := streamSection(ra, p.s, buf, sink)
	add(CheckSection, hashOK, "%s", detail)
	end := p.s.Offset + p.s.Length
	if gap := next - end; gap > 0 {
		pad := make([]byte, gap)
		if _, err := ra.ReadAt(pad, end); err != nil || firstNonZero(pad) >= 0 {
			add(CheckPadding, false, "padding at byte %d..%d is not zero", end, next)
		}
	}
	if !hashOK {
		return out // the decode would only repeat the hash's verdict
	}
	switch {
	case counter != nil:
		got, err := counter.Close()
		switch {
		case err != nil:
			add(CheckDecode, false, "section at byte %d: %v", p.s.Offset, err)
		case got != *e.Trits:
			add(CheckDecode, false, "trit counts %+v, manifest records %+v", got, *e.Trits)
		default:
			add(CheckDecode, true, "")
		}
	case scales != nil:
		add(CheckDecode, scales.bad < 0, "scales at byte %d: scale %d is %v", p.s.Offset, scales.bad, scales.badValue)
	case int8s != nil:
		add(CheckDecode, int8s.bad < 0, "int8 payload byte %d is -128 (codes are -127..127)", int8s.bad)
	}
	return out
}

// inParallel runs fn(worker, i) for i in [0, n) on workers goroutines and
// returns the results in index order.
func inParallel[R any](n, workers int, fn func(worker, i int) R) []R {
	results := make([]R, n)
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := range max(1, min(workers, n)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				i := int(next.Add(1) - 1)
				if i >= n {
					return
				}
				results[i] = fn(w, i)
			}
		}()
	}
	wg.Wait()
	return results
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

// streamSection reads section s piece by piece into buf, feeding sink,
// and compares its BLAKE3 and each piece's recorded BLAKE3 (pack/FORMAT.md,
// "Hashing"). It returns whether the section is intact and, when it is not,
// a detail that names the first bad piece where the section records them.
func streamSection(ra io.ReaderAt, s manifest.Section, buf []byte, sink io.Writer) (bool, string) {
	h := blake3.New()
	var sinkErr error
	badChunk := int64(-1)
	for k, off := 0, int64(0); off < s.Length; k, off = k+1, off+manifest.ChunkSize {
		piece := buf[:min(manifest.ChunkSize, s.Length-off)]
		if _, err := ra.ReadAt(piece, s.Offset+off); err != nil {
			return false, fmt.Sprintf("read section at byte %d: %v", s.Offset+off, err)
		}
		h.Write(piece)
		if k < len(s.Chunks) && badChunk < 0 {
			if sum := blake3.Sum256(piece); hex.EncodeToString(sum[:]) != s.Chunks[k] {
				badChunk = s.Offset + off
			}
		}
		if sink != nil && sinkErr == nil {
			_, sinkErr = sink.Write(piece)
		}
	}
	var sum [32]byte
	h.Sum(sum[:0])
	got := manifest.HexHash(sum)
	switch {
	case got != s.BLAKE3 && badChunk >= 0:
		return false, fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s; first bad chunk at byte %d", s.Offset, s.Length, got, s.BLAKE3, badChunk)
	case got != s.BLAKE3:
		return false, fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s", s.Offset, s.Length, got, s.BLAKE3)
	case badChunk >= 0:
		return false, fmt.Sprintf("section at byte %d: chunk at byte %d does not match its recorded BLAKE3", s.Offset, badChunk)
	}
	return true, ""
}

// scaleChecker checks little-endian float32 scales as they stream by:
// finite, and > 0 for ternary tensors (≥ 0 for int8, whose all-zero rows
// have scale 0). It tests each scale's bits as a 32-bit word.
type scaleChecker struct {
	ternary  bool
	n        int
	partial  []byte // the bytes of a scale split between writes
	bad      int    // first bad scale, -1 for none
	badValue float32
}

func (c *scaleChecker) Write(p []byte) (int, error) {
	n := len(p)
	if len(c.partial) > 0 {
		k := min(4-len(c.partial), len(p))
		c.partial, p = append(c.partial, p[:k]...), p[k:]
		if len(c.partial) < 4 {
			return n, nil
		}
		c.check(binary.LittleEndian.Uint32(c.partial))
		c.partial = c.partial[:0]
	}
	for ; len(p) >= 4; p = p[4:] {
		c.check(binary.LittleEndian.Uint32(p))
	}
	c.partial = append(c.partial, p...)
	return n, nil
}

// check tests the bits of the next scale: an exponent of all ones is a
// NaN or an infinity, a set sign bit on a nonzero magnitude a negative
// value, and a zero magnitude (+0 or -0) is 0.
func (c *scaleChecker) check(bits uint32) {
	const exponent, magnitude = 0x7f800000, 0x7fffffff
	mag := bits & magnitude
	bad := bits&exponent == exponent || (mag != 0 && bits>>31 != 0) || (mag == 0 && c.ternary)
	if bad && c.bad < 0 {
		c.bad, c.badValue = c.n, math.Float32frombits(bits)
	}
	c.n++
}

// int8Checker finds the first -128 in an int8 payload: codes are clamped
// to -127..127.
type int8Checker struct {
	n   int64
	bad int64 // first -128, -1 for none
}

func (c *int8Checker) Write(p []byte) (int, error) {
	if i := bytes.IndexByte(p, 0x80); i >= 0 && c.bad < 0 {
		c.bad = c.n + int64(i)
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
