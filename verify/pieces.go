package verify

import (
	"fmt"
	"io"

	"ternkit/convert"
	"ternkit/internal/treehash"
	"ternkit/manifest"
	"ternkit/pack"
)

// A section of format 1.4 over manifest.ChunkSize records the chaining
// value of each piece (pack/FORMAT.md, "Hashing"): each piece is one job,
// which hashes its bytes once into that chaining value and, where the
// section's contents check splits at piece boundaries, checks the piece's
// contents too; the section's BLAKE3 is then joined from the pieces' values.

// pieceContents is what the contents check of one piece found.
type pieceContents struct {
	counts convert.TritCounts // ternary: the piece's trits
	detail string             // the first problem, "" for none
}

// splitsIntoPieces reports whether the contents check of section p can
// run on each piece apart: scales and int8 codes are checked byte by
// byte, and bits2 and base3 payloads are whole bytes of trits; an entropy
// frame is decoded from its start.
func splitsIntoPieces(p placedSection) bool {
	e := p.owner
	switch {
	case p.scales, e.Kind == manifest.KindInt8:
		return true
	case e.Kind == manifest.KindTernary:
		return e.Codec == manifest.CodecBits2 || e.Codec == manifest.CodecBase3
	}
	return false
}

// checkPieceCV computes the chaining value of piece k of section p,
// compares it with the record and, when the contents split into pieces,
// checks the piece's contents, each block right after hashing it, while
// it is in cache (fused.go).
func checkPieceCV(src artifactBytes, p placedSection, k int, buf []byte) pieceOutcome {
	s := p.s
	off := int64(k) * manifest.ChunkSize
	var out pieceOutcome
	err := src.guard(func() {
		piece, err := src.at(buf, s.Offset+off, min(manifest.ChunkSize, s.Length-off))
		if err != nil {
			out.readErr = err
			return
		}
		if splitsIntoPieces(p) {
			sink, contents := pieceChecker(p, off, int64(len(piece)))
			at := uint64(off / treehash.ChunkSize)
			h := treehash.NewAt(at)
			hashChecking(h, piece, at, sink)
			out.cv = h.CV()
			out.contents = contents()
		} else {
			out.cv = pack.PieceCV(piece, k)
		}
		out.bad = manifest.HexHash(out.cv) != s.PieceCVs[k]
	})
	if err != nil {
		out.readErr = err
	}
	return out
}

// checkPieceContents checks the bytes of section p from offset off in it.
func checkPieceContents(p placedSection, off int64, piece []byte) pieceContents {
	sink, contents := pieceChecker(p, off, int64(len(piece)))
	sink.Write(piece)
	return contents()
}

// pieceChecker returns the writer that checks the length bytes of section
// p from offset off in it as they stream by, and the function giving what
// it found.
func pieceChecker(p placedSection, off, length int64) (io.Writer, func() pieceContents) {
	e := p.owner
	switch {
	case p.scales:
		c := &scaleChecker{ternary: e.Kind == manifest.KindTernary, bad: -1, n: int(off / 4)}
		return c, func() pieceContents {
			var out pieceContents
			if c.bad >= 0 {
				out.detail = fmt.Sprintf("scales at byte %d: scale %d is %v", p.s.Offset, c.bad, c.badValue)
			}
			return out
		}
	case e.Kind == manifest.KindInt8:
		c := &int8Checker{n: off, bad: -1}
		return c, func() pieceContents {
			var out pieceContents
			if c.bad >= 0 {
				out.detail = fmt.Sprintf("int8 payload byte %d is -128 (codes are -127..127)", c.bad)
			}
			return out
		}
	}
	// bits2 or base3: whole bytes of trits
	perByte := int64(4)
	if e.Codec == manifest.CodecBase3 {
		perByte = 5
	}
	n := min(length*perByte, max(0, manifest.NumElements(e.Shape)-off*perByte))
	counter, err := pack.NewTritCounter(pack.Codec(e.Codec), n)
	return writerOrDiscard(counter, err), func() pieceContents {
		var out pieceContents
		if err == nil {
			out.counts, err = counter.Close()
		}
		if err != nil {
			out.detail = fmt.Sprintf("section at byte %d, piece at byte %d: %v", p.s.Offset, p.s.Offset+off, err)
		}
		return out
	}
}

// writerOrDiscard is c, or io.Discard when it could not be made.
func writerOrDiscard(c *pack.TritCounter, err error) io.Writer {
	if err != nil {
		return io.Discard
	}
	return c
}

// pieceSectionChecks is sectionChecks for a section that records piece
// chaining values: the first bad piece named with its byte range, else
// the section's BLAKE3 joined from the pieces; the padding after it; and,
// when the hash holds, its contents (from the stream, or combined from
// the pieces in order).
func pieceSectionChecks(p placedSection, st streamOutcome, pieces []pieceOutcome) []Check {
	s, e := p.s, p.owner
	hash := Check{Name: CheckSection, Tensor: e.Name}
	bad := -1
	for k, o := range pieces {
		if o.readErr != nil && st.readErr == nil {
			st.readErr, st.readAt = o.readErr, s.Offset+int64(k)*manifest.ChunkSize
		}
		if o.bad && bad < 0 {
			bad = k
		}
	}
	switch {
	case st.readErr != nil:
		hash.Detail = fmt.Sprintf("read section at byte %d: %v", st.readAt, st.readErr)
	case bad >= 0:
		from := int64(bad) * manifest.ChunkSize
		to := min(from+manifest.ChunkSize, s.Length)
		hash.Detail = fmt.Sprintf("section at byte %d (%d bytes): piece %d (its bytes %d..%d, file bytes %d..%d) does not match its recorded chaining value",
			s.Offset, s.Length, bad, from, to, s.Offset+from, s.Offset+to)
	default:
		cvs := make([]treehash.CV, len(pieces))
		for k, o := range pieces {
			cvs[k] = o.cv
		}
		if got := manifest.HexHash(pack.JoinPieceCVs(cvs)); got != s.BLAKE3 {
			hash.Detail = fmt.Sprintf("section at byte %d (%d bytes): BLAKE3 %s, manifest records %s", s.Offset, s.Length, got, s.BLAKE3)
		}
	}
	hash.OK = hash.Detail == ""
	out := []Check{hash}
	if st.padBad {
		out = append(out, Check{Name: CheckPadding, Tensor: e.Name, Detail: fmt.Sprintf("padding at byte %d..%d is not zero", st.padFrom, st.padTo)})
	}
	if !hash.OK {
		return out // a bad hash: the decode would only repeat its verdict
	}
	switch {
	case st.contents != nil:
		out = append(out, st.contents())
	case splitsIntoPieces(p):
		c := Check{Name: CheckDecode, Tensor: e.Name, OK: true}
		var counts convert.TritCounts
		for _, o := range pieces {
			if o.contents.detail != "" {
				c.OK, c.Detail = false, o.contents.detail
				break
			}
			counts.Neg += o.contents.counts.Neg
			counts.Zero += o.contents.counts.Zero
			counts.Pos += o.contents.counts.Pos
		}
		if c.OK && e.Kind == manifest.KindTernary && !p.scales && counts != *e.Trits {
			c.OK, c.Detail = false, fmt.Sprintf("trit counts %+v, manifest records %+v", counts, *e.Trits)
		}
		out = append(out, c)
	}
	return out
}
