package pack

import (
	"fmt"
	"sync"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/treehash"
	"ternkit/manifest"
)

// pieceChunks is a section piece (manifest.ChunkSize bytes) in BLAKE3
// chunks, a power of two: a whole piece is a complete subtree of the
// section's BLAKE3 tree.
const pieceChunks = manifest.ChunkSize / treehash.ChunkSize

// PieceCV returns the chaining value of piece k of a section (format 1.4,
// pack/FORMAT.md, "Hashing"): the node that piece's bytes form in the
// section's own BLAKE3 tree, its first chunk numbered k × 4096. Every piece
// but the last is manifest.ChunkSize bytes long.
func PieceCV(piece []byte, k int) treehash.CV {
	at := uint64(k) * pieceChunks
	if len(piece) == manifest.ChunkSize {
		return treehash.Subtree(piece, at).CV()
	}
	h := treehash.NewAt(at)
	h.Write(piece)
	return h.CV()
}

// PieceCVs returns the chaining values of the pieces of a section of more
// than manifest.ChunkSize bytes, computed by up to workers goroutines.
func PieceCVs(p []byte, workers int) []treehash.CV {
	n := manifest.NumChunks(int64(len(p)))
	cvs := make([]treehash.CV, n)
	inPieces(n, workers, func(k int) {
		o := int64(k) * manifest.ChunkSize
		cvs[k] = PieceCV(p[o:min(o+manifest.ChunkSize, int64(len(p)))], k)
	})
	return cvs
}

// inPieces runs fn(0) … fn(n−1) on up to workers goroutines.
func inPieces(n, workers int, fn func(k int)) {
	workers = max(1, min(workers, n))
	if workers == 1 {
		for k := range n {
			fn(k)
		}
		return
	}
	var wg sync.WaitGroup
	next := make(chan int, n)
	for k := range n {
		next <- k
	}
	close(next)
	var faults convert.FaultRelay // a kept section's bytes may be the mapped source
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := range next {
				faults.Run(func() { fn(k) })
			}
		}()
	}
	wg.Wait()
	faults.Raise()
}

// JoinPieceCVs returns the BLAKE3 of a section from the chaining values of
// its pieces (two or more).
func JoinPieceCVs(cvs []treehash.CV) [32]byte {
	sum, ok := treehash.JoinCVs(cvs, pieceChunks)
	if !ok {
		panic("pack: a section of one piece has no piece chaining values")
	}
	return sum
}

// hexCVs writes chaining values as the manifest records them.
func hexCVs(cvs []treehash.CV) []string {
	if len(cvs) == 0 {
		return nil
	}
	out := make([]string, len(cvs))
	for i, c := range cvs {
		out[i] = manifest.HexHash(c)
	}
	return out
}

// sectionOf is the manifest entry of a section holding p, but for its
// offset: its BLAKE3 and, past manifest.ChunkSize, its piece chaining
// values, every byte hashed once (the BLAKE3 is joined from the pieces).
func sectionOf(p []byte, workers int) manifest.Section {
	s := manifest.Section{Length: int64(len(p))}
	if manifest.NumChunks(s.Length) == 0 {
		s.BLAKE3 = manifest.HexHash(blake3.Sum256(p))
		return s
	}
	cvs := PieceCVs(p, workers)
	s.BLAKE3, s.PieceCVs = manifest.HexHash(JoinPieceCVs(cvs)), hexCVs(cvs)
	return s
}

// sectionHasher gives the manifest entry of a section whose bytes come in
// runs of any length, every byte hashed once: each piece's chaining value,
// and the BLAKE3 joined from them or, for a section of one piece, that
// piece's root (whole pieces given at once are hashed by up to workers
// goroutines). The zero value is not ready: use newSectionHasher.
type sectionHasher struct {
	workers int
	n       int64            // bytes given
	piece   *treehash.Hasher // the last piece's, open while it may be the root
	cvs     []treehash.CV    // the closed pieces'
}

func newSectionHasher(workers int) *sectionHasher {
	return &sectionHasher{workers: workers, piece: treehash.New()}
}

func (h *sectionHasher) Write(p []byte) {
	for len(p) > 0 {
		if h.n > 0 && h.n%manifest.ChunkSize == 0 && h.piece.Len() == manifest.ChunkSize {
			// more bytes: the full open piece is not the root
			h.cvs = append(h.cvs, h.piece.CV())
			h.piece = treehash.NewAt(uint64(h.n/manifest.ChunkSize) * pieceChunks)
		}
		if h.n%manifest.ChunkSize == 0 && int64(len(p)) > manifest.ChunkSize {
			// whole pieces with bytes after them, in parallel
			k := int(h.n / manifest.ChunkSize)
			whole := (len(p) - 1) / manifest.ChunkSize
			first := len(h.cvs)
			h.cvs = append(h.cvs, make([]treehash.CV, whole)...)
			inPieces(whole, h.workers, func(i int) {
				h.cvs[first+i] = PieceCV(p[i*manifest.ChunkSize:(i+1)*manifest.ChunkSize], k+i)
			})
			h.n += int64(whole) * manifest.ChunkSize
			p = p[whole*manifest.ChunkSize:]
			h.piece = treehash.NewAt(uint64(h.n/manifest.ChunkSize) * pieceChunks)
		}
		c := min(int64(len(p)), manifest.ChunkSize-h.piece.Len())
		h.piece.Write(p[:c])
		h.n += c
		p = p[c:]
	}
}

// section returns the entry, but for its offset, once all its bytes were
// given.
func (h *sectionHasher) section() manifest.Section {
	s := manifest.Section{Length: h.n}
	if len(h.cvs) == 0 {
		s.BLAKE3 = manifest.HexHash(h.piece.Sum())
		return s
	}
	cvs := append(h.cvs, h.piece.CV())
	s.BLAKE3, s.PieceCVs = manifest.HexHash(JoinPieceCVs(cvs)), hexCVs(cvs)
	return s
}

// badPiece reports the first piece of section s (held in p) whose hash
// differs from the record: its chaining value (format 1.4) or its own
// BLAKE3 (the chunk hashes of 1.0–1.3); -1 when all match. The section's
// BLAKE3 is checked apart (checkSectionBytes).
func badPiece(p []byte, s manifest.Section, workers int) (int, string, string) {
	switch {
	case len(s.PieceCVs) > 0:
		cvs := PieceCVs(p, workers)
		for k, c := range cvs {
			if got := manifest.HexHash(c); got != s.PieceCVs[k] {
				return k, got, s.PieceCVs[k]
			}
		}
	case len(s.Chunks) > 0:
		for k, want := range s.Chunks {
			o := int64(k) * manifest.ChunkSize
			if got := manifest.HexHash(blake3.Sum256(p[o:min(o+manifest.ChunkSize, s.Length)])); got != want {
				return k, got, want
			}
		}
	}
	return -1, "", ""
}

// checkSectionBytes checks p, the bytes of section s, against its
// BLAKE3 and piece records (what names it: "section", "companion"). The error names the first bad piece (its
// index and offset in the file) or the section; fail wraps it with the
// file offset.
func checkSectionBytes(p []byte, s manifest.Section, what string, workers int, fail func(off int64, err error) error) error {
	if len(s.PieceCVs) > 0 {
		// each byte hashed once: the pieces' chaining values, compared,
		// then joined into the section's BLAKE3
		cvs := PieceCVs(p, workers)
		for k, c := range cvs {
			if got := manifest.HexHash(c); got != s.PieceCVs[k] {
				return fail(s.Offset+int64(k)*manifest.ChunkSize, fmt.Errorf("%w: piece %d (bytes %d..%d of the section) chaining value %s, manifest records %s",
					ErrHash, k, int64(k)*manifest.ChunkSize, min(int64(k+1)*manifest.ChunkSize, s.Length), got, s.PieceCVs[k]))
			}
		}
		if got := manifest.HexHash(JoinPieceCVs(cvs)); got != s.BLAKE3 {
			return fail(s.Offset, fmt.Errorf("%w: %s BLAKE3 %s, manifest records %s", ErrHash, what, got, s.BLAKE3))
		}
		return nil
	}
	if got := manifest.HexHash(blake3.Sum256(p)); got != s.BLAKE3 {
		return fail(s.Offset, fmt.Errorf("%w: %s BLAKE3 %s, manifest records %s", ErrHash, what, got, s.BLAKE3))
	}
	if k, got, want := badPiece(p, s, workers); k >= 0 {
		return fail(s.Offset+int64(k)*manifest.ChunkSize, fmt.Errorf("%w: chunk %d BLAKE3 %s, manifest records %s", ErrHash, k, got, want))
	}
	return nil
}
