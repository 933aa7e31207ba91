package convert

import (
	"errors"
	"fmt"
	"runtime"
	"runtime/debug"
	"sync"

	"ternkit/internal/treehash"
)

// WalkOptions bound a parallel walk.
type WalkOptions struct {
	// Workers run the work function and hash the source; fewer than 1
	// means 1.
	Workers int
	// Budget bounds the bytes of tensors handed out but not yet emitted;
	// it is raised to the largest tensor handed over whole so that one
	// always fits. 0 means DefaultWalkBudget.
	Budget int64
	// InPieces, when set, chooses tensors to hand over in pieces instead
	// of whole, so that a tensor that needs no worker (one copied as it
	// is) costs a piece of memory, not its length. The pieces are the
	// tensor's segments: its bytes cut at the file offsets that are
	// multiples of SpanSegment, so none is longer than SpanSegment. Each
	// piece goes to Piece on the caller's goroutine, in tensor order among
	// the other tensors' emits, with the tensor's SourceID given with the
	// last piece (nil before). A tensor of no bytes comes as one empty
	// piece. A piece belongs to the call and must not be modified.
	InPieces func(t *Tensor) bool
	Piece    func(t *Tensor, off int64, piece []byte, id *SourceID) error
	// Plain, when set, chooses tensors whose SourceID also gives the
	// BLAKE3 of their bytes as an input of their own (SourceID.Plain),
	// hashed on the workers segment by segment: the section hash of a
	// tensor kept as it is, or the source_blake3 of formats 1.0 to 1.3.
	Plain func(t *Tensor) bool
}

// DefaultPieceSize is the size of the pieces callers choose to take large
// kept tensors in: a tensor longer than it goes through
// WalkOptions.InPieces.
const DefaultPieceSize = 16 << 20

// DefaultWalkBudget is the default bound on tensor bytes in flight.
const DefaultWalkBudget = 128 << 20

// WalkOrdered reads every tensor once, in Tensors order, and hands each
// tensor to one of opts.Workers goroutines: work(worker, t, raw) runs
// concurrently, with worker in [0, Workers) so that a worker can keep
// scratch space of its own. Beside it the workers hash the source once:
// each tensor's segments (pack/FORMAT.md, "source_span") become parts of
// each file's BLAKE3 tree, joined in order into the file's hash
// (Files[i].BLAKE3, what b3sum prints) and into the tensor's SourceID.
//
// raw is a slice of a read-only mapping of the file where the system
// maps files (else a buffer read afresh): it belongs to the call, and to
// what it returns, until emit has run, and must not be modified. A
// goroutine of work's own that touches raw runs through CatchFault and
// hands its error back, since a file truncated while mapped faults there. emit(t, id, result) runs on the caller's goroutine in
// tensor order, so that what it writes is the same for any worker count.
// The first error, in tensor order, stops the walk and is returned; a
// file truncated during the walk is an *InputError wrapping ErrTruncated
// naming file, tensor and offset.
func WalkOrdered[R any](s *Source, opts WalkOptions,
	work func(worker int, t *Tensor, raw []byte) (R, error),
	emit func(t *Tensor, id SourceID, r R) error) error {
	if s.open == nil {
		return &InputError{File: s.Path, Offset: -1, Err: errClosed}
	}
	workers := max(1, opts.Workers)
	budget := opts.Budget
	if budget <= 0 {
		budget = DefaultWalkBudget
	}
	inPieces := func(t *Tensor) bool { return opts.InPieces != nil && opts.InPieces(t) }
	wantPlain := func(t *Tensor) bool { return opts.Plain != nil && opts.Plain(t) }
	for _, t := range s.Tensors {
		if !inPieces(t) {
			budget = max(budget, t.Length)
		}
	}
	views := make([]fileView, len(s.open))
	for i, of := range s.open {
		views[i] = openView(of.f, s.Files[i].Size)
	}
	defer func() {
		for _, v := range views {
			v.close()
		}
	}()

	// A unit is what the sequencer takes in order: the start of a file
	// (its header), a tensor handed over whole (its segments and its work),
	// one piece of a tensor handed over in pieces, or the end of a file.
	type unitKind int
	const (
		unitStart unitKind = iota
		unitWhole
		unitPiece
		unitEnd
	)
	type unit struct {
		kind   unitKind
		index  int
		file   int
		t      *Tensor
		segs   int    // segment results to wait for
		raw    []byte // the whole tensor's or the piece's bytes
		off    int64  // a piece's offset in its tensor
		header []byte
		last   bool  // the last piece of its tensor
		plain  bool  // the tensor's plain BLAKE3 is asked for
		err    error // found while handing out
	}
	// A job hashes one segment (seg >= 0) or runs work on a whole tensor.
	type job struct {
		index, seg, file int
		t                *Tensor
		data             []byte
		at               int64 // data's offset in its file
		plain            bool  // hash the segment in the tensor's own tree too
	}
	type result struct {
		index, seg int
		hash       segmentHash
		plain      segmentHash // in the tensor's own tree, from its first byte
		r          R
		err        error
	}
	jobs := make(chan job, 4*workers)
	results := make(chan result, 4*workers)
	units := make(chan unit, 64)
	stop := make(chan struct{})
	bytesInFlight := newByteBudget(budget)
	var wg sync.WaitGroup

	// the dispatcher: hands out units in order, and their jobs after them
	wg.Add(1)
	go func() {
		defer wg.Done()
		defer close(units)
		defer close(jobs)
		send := func(u unit) bool {
			select {
			case units <- u:
				return u.err == nil
			case <-stop:
				return false
			}
		}
		sendJob := func(j job) bool {
			select {
			case jobs <- j:
				return true
			case <-stop:
				return false
			}
		}
		index := 0
		for i, of := range s.open {
			path := s.Files[i].Path
			header, err := readAt(of.f, 0, of.dataStart, path, "")
			if !send(unit{kind: unitStart, index: index, file: i, header: header, err: err}) {
				return
			}
			index++
			for _, t := range of.tensors {
				segs := segments(t.Offset, t.Offset+t.Length)
				plain := wantPlain(t)
				if inPieces(t) {
					if len(segs) == 0 {
						if !send(unit{kind: unitPiece, index: index, file: i, t: t, last: true, plain: plain}) {
							return
						}
						index++
					}
					for k, g := range segs {
						if !bytesInFlight.acquire(g.e-g.s, stop) {
							return
						}
						raw, err := views[i].bytes(g.s, g.e, path, t.Name)
						u := unit{kind: unitPiece, index: index, file: i, t: t, segs: 1, raw: raw,
							off: g.s - t.Offset, last: k == len(segs)-1, plain: plain, err: err}
						if !send(u) || !sendJob(job{index: index, file: i, t: t, data: raw, at: g.s, plain: plain}) {
							return
						}
						index++
					}
					continue
				}
				if !bytesInFlight.acquire(t.Length, stop) {
					return
				}
				raw, err := views[i].bytes(t.Offset, t.Offset+t.Length, path, t.Name)
				if !send(unit{kind: unitWhole, index: index, file: i, t: t, segs: len(segs), raw: raw, plain: plain, err: err}) {
					return
				}
				// the work first, so that it starts while others hash
				if !sendJob(job{index: index, seg: -1, file: i, t: t, data: raw, at: t.Offset}) {
					return
				}
				for k, g := range segs {
					if !sendJob(job{index: index, seg: k, file: i, t: t, data: raw[g.s-t.Offset : g.e-t.Offset], at: g.s, plain: plain}) {
						return
					}
				}
				index++
			}
			end := of.dataStart + of.dataLen
			var u unit
			var probe [1]byte
			if got, _ := of.f.ReadAt(probe[:], end); got > 0 {
				u.err = inputError(path, "", end, ErrOffsets, "trailing bytes after the last tensor (the file grew after it was opened)")
			}
			u.kind, u.index, u.file = unitEnd, index, i
			if !send(u) {
				return
			}
			index++
		}
	}()

	// the workers
	var workersDone sync.WaitGroup
	for w := range workers {
		workersDone.Add(1)
		go func() {
			defer workersDone.Done()
			debug.SetPanicOnFault(true)
			for j := range jobs {
				d := result{index: j.index, seg: j.seg}
				d.err = guardFault(views[j.file], s.Files[j.file].Path, j.t.Name, func() error {
					if j.seg < 0 {
						var err error
						d.r, err = work(w, j.t, j.data)
						return err
					}
					d.hash = hashSegment(j.data, j.at)
					if j.plain {
						d.plain = hashSegment(j.data, j.at-j.t.Offset)
					}
					return nil
				})
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

	// the sequencer: takes the units in order, each once its results are
	// in, and joins the hashes in file order
	pending := map[[2]int]result{}
	arrived := map[int]int{}
	var firstErr error
	var fileHash *treehash.Hasher
	var span spanHasher
	var plain *treehash.Hasher // a tensor's own tree, for SourceID.Plain
	for u := range units {
		need := u.segs
		if u.kind == unitWhole {
			need++
		}
		if u.err != nil {
			firstErr = u.err
			break
		}
		for arrived[u.index] < need {
			r, ok := <-results
			if !ok {
				break
			}
			pending[[2]int{r.index, r.seg}] = r
			arrived[r.index]++
		}
		if arrived[u.index] < need {
			break // stopped: cannot happen before the first error
		}
		delete(arrived, u.index)
		take := func(seg int) result {
			r := pending[[2]int{u.index, seg}]
			delete(pending, [2]int{u.index, seg})
			return r
		}
		switch u.kind {
		case unitStart:
			fileHash = treehash.New()
			fileHash.Write(u.header)
		case unitEnd:
			s.Files[u.file].BLAKE3 = fileHash.Sum()
		case unitWhole:
			t := u.t
			done := take(-1)
			hashes := make([]result, u.segs)
			for k := range hashes {
				if hashes[k] = take(k); hashes[k].err != nil && firstErr == nil {
					firstErr = hashes[k].err
				}
			}
			if firstErr == nil {
				firstErr = done.err
			}
			if firstErr != nil {
				break
			}
			h := newSpanHasher(t.Offset, t.Offset+t.Length)
			if u.plain {
				plain = treehash.New()
			}
			for k := range hashes {
				hashes[k].hash.feed(fileHash)
				h.add(&hashes[k].hash)
				if u.plain {
					hashes[k].plain.feed(plain)
				}
			}
			id := SourceID{Span: h.sum()}
			if u.plain {
				id.Plain = new([32]byte)
				*id.Plain = plain.Sum()
			}
			firstErr = guardCaller(views[u.file], s.Files[u.file].Path, t.Name, func() error {
				return emit(t, id, done.r)
			})
			views[u.file].release(t.Offset, t.Offset+t.Length)
			bytesInFlight.release(t.Length)
		case unitPiece:
			t := u.t
			if u.off == 0 {
				span = newSpanHasher(t.Offset, t.Offset+t.Length)
				if u.plain {
					plain = treehash.New()
				}
			}
			if u.segs > 0 {
				r := take(0)
				if firstErr = r.err; firstErr != nil {
					break
				}
				r.hash.feed(fileHash)
				span.add(&r.hash)
				if u.plain {
					r.plain.feed(plain)
				}
			}
			var id *SourceID
			if u.last {
				id = &SourceID{Span: span.sum()}
				if u.plain {
					id.Plain = new([32]byte)
					*id.Plain = plain.Sum()
				}
			}
			firstErr = guardCaller(views[u.file], s.Files[u.file].Path, t.Name, func() error {
				return opts.Piece(t, u.off, u.raw, id)
			})
			views[u.file].release(t.Offset+u.off, t.Offset+u.off+int64(len(u.raw)))
			bytesInFlight.release(int64(len(u.raw)))
		}
		if firstErr != nil {
			break
		}
	}
	close(stop)
	bytesInFlight.wake()
	for range units { // let the dispatcher finish
	}
	for range results { // let the workers finish
	}
	wg.Wait()
	return firstErr
}

// A MemoryFault is a fault reading memory that CatchFault caught: in a
// walk, a mapped source file truncated while it was read.
type MemoryFault struct {
	Addr uintptr
	Err  error // the runtime's error
}

func (f *MemoryFault) Error() string { return "memory fault: " + f.Err.Error() }

// CatchFault runs fn with debug.SetPanicOnFault set on the calling
// goroutine and returns a *MemoryFault for a fault reading memory (any
// other panic goes on). A goroutine that a walk's work function starts on
// the bytes it was given runs its body through CatchFault and returns the
// error: the walk turns it into an *InputError naming file, tensor and
// offset.
func CatchFault(fn func()) (err error) {
	old := debug.SetPanicOnFault(true)
	defer debug.SetPanicOnFault(old)
	defer func() {
		if r := recover(); r != nil {
			re, ok := r.(runtime.Error)
			fault, hasAddr := r.(interface{ Addr() uintptr })
			if !ok || !hasAddr {
				panic(r)
			}
			err = &MemoryFault{Addr: fault.Addr(), Err: re}
		}
	}()
	fn()
	return nil
}

// A FaultRelay carries a memory fault from helper goroutines to the
// goroutine that waits for them: each helper runs its body through Run,
// and the waiting goroutine calls Raise after the helpers are done, so
// that the fault reaches the walk (which names file, tensor and offset)
// instead of ending the process. The zero value is ready.
type FaultRelay struct {
	mu    sync.Mutex
	fault *MemoryFault
}

// Run runs fn through CatchFault and keeps the first fault.
func (r *FaultRelay) Run(fn func()) {
	var mf *MemoryFault
	if err := CatchFault(fn); errors.As(err, &mf) {
		r.mu.Lock()
		if r.fault == nil {
			r.fault = mf
		}
		r.mu.Unlock()
	}
}

// Raise panics on the calling goroutine with the first fault kept, as
// the runtime raised it.
func (r *FaultRelay) Raise() {
	r.mu.Lock()
	f := r.fault
	r.mu.Unlock()
	if f != nil {
		panic(f.Err)
	}
}

// guardFault runs fn, on a goroutine that has called
// debug.SetPanicOnFault(true), and turns a fault in the view's mapping (a
// file truncated while mapped) into an *InputError wrapping ErrTruncated
// that names the file, the tensor and the offset. Any other panic goes on.
func guardFault(v fileView, path, tensor string, fn func() error) (err error) {
	defer func() {
		r := recover()
		if r == nil {
			return
		}
		re, ok := r.(runtime.Error)
		fault, hasAddr := r.(interface{ Addr() uintptr })
		if !ok || !hasAddr {
			panic(r)
		}
		off := v.offsetOf(fault.Addr())
		if off < 0 {
			panic(r) // not the source's mapping: a fault of its own
		}
		err = truncatedWhileMapped(path, tensor, off, re)
	}()
	err = fn()
	var mf *MemoryFault
	if errors.As(err, &mf) {
		if off := v.offsetOf(mf.Addr); off >= 0 {
			err = truncatedWhileMapped(path, tensor, off, mf.Err)
		}
	}
	return err
}

func truncatedWhileMapped(path, tensor string, off int64, fault error) error {
	return &InputError{File: path, Tensor: tensor, Offset: off,
		Err: fmt.Errorf("%w: the file ended while it was read (truncated after it was opened): %v", ErrTruncated, fault)}
}

// guardCaller is guardFault for the caller's goroutine: it sets the fault
// mode for the call only.
func guardCaller(v fileView, path, tensor string, fn func() error) error {
	old := debug.SetPanicOnFault(true)
	defer debug.SetPanicOnFault(old)
	return guardFault(v, path, tensor, fn)
}

// byteBudget bounds the bytes handed out but not yet released.
type byteBudget struct {
	mu      sync.Mutex
	cond    *sync.Cond
	inUse   int64
	budget  int64
	stopped bool
}

func newByteBudget(budget int64) *byteBudget {
	b := &byteBudget{budget: budget}
	b.cond = sync.NewCond(&b.mu)
	return b
}

// acquire waits until n more bytes fit (or nothing is in use); it returns
// false when stop is closed.
func (b *byteBudget) acquire(n int64, stop <-chan struct{}) bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	for {
		select {
		case <-stop:
			return false
		default:
		}
		if b.inUse == 0 || b.inUse+n <= b.budget {
			b.inUse += n
			return true
		}
		b.cond.Wait()
	}
}

func (b *byteBudget) release(n int64) {
	b.mu.Lock()
	b.inUse -= n
	b.mu.Unlock()
	b.cond.Broadcast()
}

// wake lets an acquire waiting for the budget see that the walk stopped.
func (b *byteBudget) wake() {
	b.mu.Lock()
	b.cond.Broadcast()
	b.mu.Unlock()
}
