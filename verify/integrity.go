package verify

import (
	"bytes"
	"cmp"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"io"
	"math"
	"slices"
	"sync"
	"sync/atomic"

	"github.com/zeebo/blake3"

	"ternkit/internal/treehash"
	"ternkit/manifest"
	"ternkit/pack"
)

// placedSection is one section of the artifact and the tensor it belongs to.
type placedSection struct {
	s      manifest.Section
	owner  *manifest.Tensor
	scales bool // the scales section, not the payload
}

// sectionJob is one unit of the section checks: the stream of a whole
// section (piece < 0), or the recorded hash of one of its pieces.
type sectionJob struct {
	section int
	piece   int
}

// pieceOutcome is what a piece job found.
type pieceOutcome struct {
	bad     bool  // the piece's hash differs from the recorded one
	readErr error // the piece could not be read
	// format 1.4: the piece's chaining value, and what its contents check
	// found when the section's contents are checked piece by piece
	cv       treehash.CV
	contents pieceContents
}

// checkSections checks every section: its BLAKE3, the zero padding after
// it, and its contents (trit payloads: codes, padding, counts; int8 codes;
// scales). A section of format 1.4 over manifest.ChunkSize records its
// pieces' chaining values: each piece is a job that hashes it once into
// its value and checks its contents where they split at pieces (pieces.go),
// and the section's BLAKE3 is joined from the values. Any other section is
// streamed piece by piece through one hash and its contents checker; one
// of 1.0 to 1.3 over manifest.ChunkSize also records each piece's own
// BLAKE3, which cannot be derived from the section's (a piece hashed alone
// compresses differently from the same bytes inside the section), so each
// is a job of its own. Jobs run on workers in parallel, longest first, each
// worker holding one piece, and the checks are reported in file order, the
// same for any worker count.
func checkSections(rep *Report, a *pack.Artifact, src artifactBytes, workers int, advance func(n int64)) {
	m := a.Manifest()
	var all []placedSection
	for i := range m.Tensors {
		e := &m.Tensors[i]
		all = append(all, placedSection{e.Section, e, false})
		if e.Scales != nil {
			all = append(all, placedSection{*e.Scales, e, true})
		}
	}
	all = append(all, companionSections(m)...)
	var jobs []sectionJob
	pieces := make([][]pieceOutcome, len(all))
	for i, p := range all {
		jobs = append(jobs, sectionJob{i, -1})
		n := max(len(p.s.Chunks), len(p.s.PieceCVs))
		pieces[i] = make([]pieceOutcome, n)
		for k := range n {
			jobs = append(jobs, sectionJob{i, k})
		}
	}
	cost := func(j sectionJob) int64 {
		s := all[j.section].s
		if j.piece < 0 {
			if len(s.PieceCVs) > 0 {
				return 0 // the pieces hash it: a stream checks padding, at most contents
			}
			return s.Length
		}
		return min(manifest.ChunkSize, s.Length-int64(j.piece)*manifest.ChunkSize)
	}
	// longest first balances the workers: a long section's stream starts
	// while pieces and short sections fill the other workers
	slices.SortStableFunc(jobs, func(x, y sectionJob) int { return cmp.Compare(cost(y), cost(x)) })

	pieceLen := min(manifest.ChunkSize, maxLength(m))
	if src.mapped != nil {
		pieceLen = 0 // pieces are slices of the map
	}
	bufs := make([][]byte, workers)
	streams := make([]streamOutcome, len(all))
	inParallel(len(jobs), workers, func(worker, i int) struct{} {
		if bufs[worker] == nil && pieceLen > 0 {
			bufs[worker] = make([]byte, pieceLen)
		}
		j := jobs[i]
		p := all[j.section]
		if j.piece >= 0 && len(p.s.PieceCVs) > 0 {
			pieces[j.section][j.piece] = checkPieceCV(src, p, j.piece, bufs[worker])
			return struct{}{}
		}
		if j.piece >= 0 {
			pieces[j.section][j.piece] = checkPiece(src, p.s, j.piece, bufs[worker])
			return struct{}{}
		}
		next := a.ManifestOffset()
		if j.section+1 < len(all) {
			next = all[j.section+1].s.Offset
		}
		streams[j.section] = streamSection(src, p, next, bufs[worker])
		return struct{}{}
	})
	padFail := 0
	for i, st := range streams {
		for _, c := range sectionChecks(all[i], st, pieces[i]) {
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

// streamOutcome is what the stream of a section found.
type streamOutcome struct {
	readErr  error  // reading the section failed
	readAt   int64  // where
	sum      string // the section's BLAKE3, hex
	padBad   bool   // the padding after the section is not zero
	padFrom  int64
	padTo    int64
	contents func() Check // the contents check, once the hash holds
}

// streamSection hashes section p piece by piece, feeding the contents
// checker of its kind, and checks the padding up to next; buf holds a
// piece when the file is read rather than mapped.
func streamSection(src artifactBytes, p placedSection, next int64, buf []byte) streamOutcome {
	s := p.s
	var out streamOutcome
	sink, contents := contentsChecker(p)
	out.contents = contents
	at, end := s.Offset, s.Offset+s.Length
	if len(s.PieceCVs) > 0 {
		// the piece jobs hash the section (and check contents that split
		// into pieces); what is left is contents that do not
		if splitsIntoPieces(p) {
			sink, out.contents = nil, nil
			at = end
		}
		end = s.Offset + s.Length
	}
	err := src.guard(func() {
		if len(s.PieceCVs) > 0 {
			for ; at < end && sink != nil; at += manifest.ChunkSize {
				piece, err := src.at(buf, at, min(manifest.ChunkSize, end-at))
				if err != nil {
					out.readErr, out.readAt = err, at
					return
				}
				sink.Write(piece)
			}
			return
		}
		// each block is checked right after it is hashed, while in cache
		h := treehash.New()
		for ; at < end; at += manifest.ChunkSize {
			piece, err := src.at(buf, at, min(manifest.ChunkSize, end-at))
			if err != nil {
				out.readErr, out.readAt = err, at
				return
			}
			if hashChecking(h, piece, uint64(at-s.Offset)/treehash.ChunkSize, sink) != nil {
				sink = nil // the checker has its verdict
			}
		}
		out.sum = manifest.HexHash(h.Sum())
	})
	if err != nil {
		out.readErr, out.readAt = err, at
	}
	if gap := next - end; gap > 0 {
		err := src.guard(func() {
			pad, err := src.at(nil, end, gap)
			out.padBad = err != nil || firstNonZero(pad) >= 0
		})
		if err != nil || out.padBad {
			out.padBad, out.padFrom, out.padTo = true, end, next
		}
	}
	return out
}

// checkPiece compares the BLAKE3 of piece k of section s with the one the
// manifest records.
func checkPiece(src artifactBytes, s manifest.Section, k int, buf []byte) pieceOutcome {
	off := int64(k) * manifest.ChunkSize
	var out pieceOutcome
	err := src.guard(func() {
		piece, err := src.at(buf, s.Offset+off, min(manifest.ChunkSize, s.Length-off))
		if err != nil {
			out.readErr = err
			return
		}
		sum := blake3.Sum256(piece)
		out.bad = hex.EncodeToString(sum[:]) != s.Chunks[k]
	})
	if err != nil {
		out.readErr = err
	}
	return out
}

// contentsChecker returns the writer that checks a section's contents as
// they stream by and the function giving its verdict, or nils for a kept
// tensor's bytes, which only the hash covers.
func contentsChecker(p placedSection) (io.Writer, func() Check) {
	e := p.owner
	check := func(ok bool, format string, args ...any) Check {
		c := Check{Name: CheckDecode, Tensor: e.Name, OK: ok}
		if !ok {
			c.Detail = fmt.Sprintf(format, args...)
		}
		return c
	}
	switch {
	case p.scales:
		scales := &scaleChecker{ternary: e.Kind == manifest.KindTernary, bad: -1}
		return scales, func() Check {
			return check(scales.bad < 0, "scales at byte %d: scale %d is %v", p.s.Offset, scales.bad, scales.badValue)
		}
	case e.Kind == manifest.KindTernary:
		counter, err := pack.NewTritCounter(pack.Codec(e.Codec), manifest.NumElements(e.Shape))
		if err != nil { // the manifest's rules admit only known codecs
			return nil, func() Check { return check(false, "%v", err) }
		}
		return counter, func() Check {
			got, err := counter.Close()
			switch {
			case err != nil:
				return check(false, "section at byte %d: %v", p.s.Offset, err)
			case got != *e.Trits:
				return check(false, "trit counts %+v, manifest records %+v", got, *e.Trits)
			}
			return check(true, "")
		}
	case e.Kind == manifest.KindInt8:
		int8s := &int8Checker{bad: -1}
		return int8s, func() Check {
			return check(int8s.bad < 0, "int8 payload byte %d is -128 (codes are -127..127)", int8s.bad)
		}
	}
	return nil, nil
}

// sectionChecks turns what the stream and the piece jobs of a section
// found into checks: the section hash (naming the first bad piece), the
// padding after it, and, when the hash holds, its contents.
func sectionChecks(p placedSection, st streamOutcome, pieces []pieceOutcome) []Check {
	s, name := p.s, p.owner.Name
	if len(s.PieceCVs) > 0 {
		return pieceSectionChecks(p, st, pieces)
	}
	hash := Check{Name: CheckSection, Tensor: name, OK: true}
	badChunk := int64(-1)
	for k, o := range pieces {
		if o.readErr != nil && st.readErr == nil {
			st.readErr, st.readAt = o.readErr, s.Offset+int64(k)*manifest.ChunkSize
		}
		if o.bad && badChunk < 0 {
			badChunk = s.Offset + int64(k)*manifest.ChunkSize
		}
	}
	switch {
	case st.readErr != nil:
		hash.Detail = fmt.Sprintf("read section at byte %d: %v", st.readAt, st.readErr)
	case st.sum != s.BLAKE3 && badChunk >= 0:
		hash.Detail = fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s; first bad chunk at byte %d", s.Offset, s.Length, st.sum, s.BLAKE3, badChunk)
	case st.sum != s.BLAKE3:
		hash.Detail = fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s", s.Offset, s.Length, st.sum, s.BLAKE3)
	case badChunk >= 0:
		hash.Detail = fmt.Sprintf("section at byte %d: chunk at byte %d does not match its recorded BLAKE3", s.Offset, badChunk)
	}
	hash.OK = hash.Detail == ""
	out := []Check{hash}
	if st.padBad {
		out = append(out, Check{Name: CheckPadding, Tensor: name, Detail: fmt.Sprintf("padding at byte %d..%d is not zero", st.padFrom, st.padTo)})
	}
	if hash.OK && st.contents != nil { // a bad hash: the decode would only repeat its verdict
		out = append(out, st.contents())
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
	for _, c := range m.Companions {
		n = max(n, c.Section.Length)
	}
	return n
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
