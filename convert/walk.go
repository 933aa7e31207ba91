package convert

import (
	"errors"
	"fmt"
	"io"
	"sync"

	"github.com/zeebo/blake3"
)

// WalkOptions bound a parallel walk.
type WalkOptions struct {
	// Workers run the work function; fewer than 1 means 1.
	Workers int
	// Budget bounds the bytes of tensors read but not yet emitted; it is
	// raised to the largest tensor handed over whole so that one always
	// fits. 0 means DefaultWalkBudget.
	Budget int64
	// InPieces, when set, chooses tensors to hand over in pieces of
	// PieceSize bytes (the last one shorter) instead of whole, so that a
	// tensor that needs no worker (one copied as it is) costs PieceSize of
	// memory, not its length. Each piece goes to Piece on the caller's
	// goroutine, in tensor order among the other tensors' emits, with the
	// tensor's BLAKE3 given with the last piece (nil before). A piece
	// belongs to the call.
	InPieces func(t *Tensor) bool
	Piece    func(t *Tensor, off int64, piece []byte, sum *[32]byte) error
	// PieceSize is the size of those pieces; 0 means DefaultPieceSize.
	PieceSize int64
}

// DefaultPieceSize is the size of the pieces a tensor chosen by
// WalkOptions.InPieces is handed over in.
const DefaultPieceSize = 16 << 20

// DefaultWalkBudget is the default bound on tensor bytes in flight.
const DefaultWalkBudget = 128 << 20

// WalkOrdered reads every tensor once, in Tensors order, as Walk does
// (hashing each file whole as it goes), and hands each tensor to one of
// opts.Workers goroutines: work(worker, t, raw, sum) runs concurrently, with
// sum the BLAKE3 of raw and worker in [0, Workers) so that a worker can keep
// scratch space of its own. raw belongs to the call, and to what it returns,
// until emit has run; it must not be modified, since the file's hash is
// taken from the same bytes concurrently. emit(t, result) runs on the
// caller's goroutine in tensor order, so that what it writes is the same
// for any worker count. The first error, in tensor order, stops the walk
// and is returned.
func WalkOrdered[R any](s *Source, opts WalkOptions,
	work func(worker int, t *Tensor, raw []byte, sum [32]byte) (R, error),
	emit func(t *Tensor, r R) error) error {
	if s.open == nil {
		return &InputError{File: s.Path, Offset: -1, Err: errClosed}
	}
	workers := max(1, opts.Workers)
	budget := opts.Budget
	if budget <= 0 {
		budget = DefaultWalkBudget
	}
	inPieces := func(t *Tensor) bool { return opts.InPieces != nil && opts.InPieces(t) }
	pieceSize := opts.PieceSize
	if pieceSize <= 0 {
		pieceSize = DefaultPieceSize
	}
	budget = max(budget, pieceSize)
	for _, t := range s.Tensors {
		if !inPieces(t) {
			budget = max(budget, t.Length)
		}
	}

	// A job is a whole tensor, or one piece of a tensor handed over in
	// pieces (piece set, off its offset in the tensor, last on the last).
	type job struct {
		index       int
		t           *Tensor
		raw         []byte
		err         error
		piece, last bool
		off         int64
	}
	type done struct {
		index       int
		t           *Tensor
		raw         []byte
		result      R
		err         error
		piece, last bool
		off         int64
	}
	jobs := make(chan job, workers)
	results := make(chan done, workers)
	stop := make(chan struct{})
	pool := newBufferPool(budget)
	var wg sync.WaitGroup

	// the reader: one goroutine reads the files in order; a second one
	// hashes each file whole, in order, beside the workers
	hashes := make(chan fileBytes, 2*workers+2)
	wg.Add(2)
	go func() {
		defer wg.Done()
		hashFiles(s, hashes, pool)
	}()
	go func() {
		defer wg.Done()
		defer close(jobs)
		defer close(hashes)
		index := 0
		for i, of := range s.open {
			path := s.Files[i].Path
			for _, t := range of.tensors {
				step, pieces := t.Length, false
				if inPieces(t) {
					step, pieces = pieceSize, true
				}
				for off := int64(0); ; off += step {
					n := min(step, t.Length-off)
					raw, ok := pool.get(n, stop)
					if !ok {
						return
					}
					j := job{index: index, t: t, raw: raw, piece: pieces, off: off, last: off+n == t.Length}
					index++
					if got, err := of.f.ReadAt(raw, t.Offset+off); got < len(raw) {
						if err == nil || errors.Is(err, io.EOF) {
							err = io.ErrUnexpectedEOF
						}
						j.err = &InputError{File: path, Tensor: t.Name, Offset: t.Offset + off + int64(got),
							Err: fmt.Errorf("%w: read %d of %d bytes: %w", ErrTruncated, got, len(raw), err)}
					} else if len(raw) > 0 {
						pool.hold(raw) // until the file hasher is done with it
						hashes <- fileBytes{file: i, raw: raw}
					}
					select {
					case jobs <- j:
					case <-stop:
						return
					}
					if j.err != nil {
						return
					}
					if j.last {
						break
					}
				}
			}
			end := of.dataStart + of.dataLen
			var probe [1]byte
			if got, _ := of.f.ReadAt(probe[:], end); got > 0 {
				select {
				case jobs <- job{index: index, err: inputError(path, "", end, ErrOffsets, "trailing bytes after the last tensor (the file grew after it was opened)")}:
				case <-stop:
				}
				return
			}
			hashes <- fileBytes{file: i, end: true}
		}
	}()

	// the workers
	var workersDone sync.WaitGroup
	for w := range workers {
		workersDone.Add(1)
		go func() {
			defer workersDone.Done()
			for j := range jobs {
				d := done{index: j.index, t: j.t, raw: j.raw, err: j.err, piece: j.piece, last: j.last, off: j.off}
				if d.err == nil && !j.piece {
					d.result, d.err = work(w, j.t, j.raw, blake3.Sum256(j.raw))
				}
				select {
				case results <- d:
				case <-stop:
					return
				}
			}
		}()
	}
	go func() {
		workersDone.Wait()
		close(results)
	}()

	// the sequencer: emit in tensor order; a tensor in pieces is hashed
	// here, piece by piece, as its pieces come in order
	pending := map[int]done{}
	next := 0
	var firstErr error
	var pieceHash *blake3.Hasher
	emitPiece := func(r done) error {
		if r.off == 0 {
			pieceHash = blake3.New()
		}
		pieceHash.Write(r.raw)
		var sum *[32]byte
		if r.last {
			sum = new([32]byte)
			pieceHash.Sum(sum[:0])
		}
		return opts.Piece(r.t, r.off, r.raw, sum)
	}
	for d := range results {
		pending[d.index] = d
		for firstErr == nil {
			r, ok := pending[next]
			if !ok {
				break
			}
			delete(pending, next)
			next++
			if r.err != nil {
				firstErr = r.err
				break
			}
			var err error
			if r.piece {
				err = emitPiece(r)
			} else {
				err = emit(r.t, r.result)
			}
			if err != nil {
				firstErr = err
				break
			}
			pool.put(r.raw)
		}
		if firstErr != nil {
			break
		}
	}
	close(stop)
	pool.wake()
	for range results { // let the workers finish
	}
	wg.Wait()
	return firstErr
}

// fileBytes is the next piece of a file for hashFiles: a tensor's bytes,
// or the end of the file.
type fileBytes struct {
	file int
	raw  []byte
	end  bool
}

// hashFiles hashes each file of s whole from the pieces the reader sends in
// file order (the header was hashed when the file was opened), records
// each file's BLAKE3 at its end, and releases each piece to the pool.
func hashFiles(s *Source, pieces <-chan fileBytes, pool *bufferPool) {
	var h *blake3.Hasher
	current := -1
	for p := range pieces {
		if p.file != current {
			current, h = p.file, s.open[p.file].prefix.Clone()
		}
		if p.end {
			copy(s.Files[p.file].BLAKE3[:], h.Sum(nil))
			continue
		}
		h.Write(p.raw)
		pool.put(p.raw)
	}
}

// bufferPool hands out byte slices while the bytes in use stay within a
// budget, reusing returned slices so that memory stays at the budget.
type bufferPool struct {
	mu     sync.Mutex
	cond   *sync.Cond
	free   [][]byte
	inUse  int64
	budget int64
	// refs counts the holders of a slice handed out beyond the first, by
	// the address of its first byte
	refs map[*byte]int
}

func newBufferPool(budget int64) *bufferPool {
	p := &bufferPool{budget: budget, refs: map[*byte]int{}}
	p.cond = sync.NewCond(&p.mu)
	return p
}

// get returns a slice of length n, waiting while the budget is spent; it
// returns false when stop is closed.
func (p *bufferPool) get(n int64, stop <-chan struct{}) ([]byte, bool) {
	p.mu.Lock()
	defer p.mu.Unlock()
	for p.inUse > 0 && p.inUse+n > p.budget {
		select {
		case <-stop:
			return nil, false
		default:
		}
		p.cond.Wait()
	}
	select {
	case <-stop:
		return nil, false
	default:
	}
	p.inUse += n
	best := -1
	for i, b := range p.free {
		if int64(cap(b)) >= n && (best < 0 || cap(b) < cap(p.free[best])) {
			best = i
		}
	}
	if best >= 0 {
		b := p.free[best]
		p.free = append(p.free[:best], p.free[best+1:]...)
		return b[:n], true
	}
	// drop free slices too small to serve, so that memory stays bounded
	var kept int64
	for _, b := range p.free {
		kept += int64(cap(b))
	}
	if kept+p.inUse > p.budget {
		p.free = nil
	}
	return make([]byte, n), true
}

// wake lets a get waiting for the budget see that the walk stopped.
func (p *bufferPool) wake() {
	p.mu.Lock()
	p.cond.Broadcast()
	p.mu.Unlock()
}

// hold adds a holder to b, a slice from get: it returns to the pool when
// every holder has put it.
func (p *bufferPool) hold(b []byte) {
	p.mu.Lock()
	p.refs[&b[0]]++
	p.mu.Unlock()
}

func (p *bufferPool) put(b []byte) {
	p.mu.Lock()
	if len(b) > 0 {
		if n := p.refs[&b[0]]; n > 0 {
			if n == 1 {
				delete(p.refs, &b[0])
			} else {
				p.refs[&b[0]] = n - 1
			}
			p.mu.Unlock()
			return
		}
	}
	p.inUse -= int64(len(b))
	p.free = append(p.free, b)
	p.mu.Unlock()
	p.cond.Broadcast()
}
