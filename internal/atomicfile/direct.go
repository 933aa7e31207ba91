package atomicfile

import (
	"fmt"
	"os"
	"sync"
	"unsafe"
)

// directStep is the run of bytes a file in direct mode stages and hands
// to the disk in one write: a multiple of directAlign.
const directStep = 8 << 20

// directRuns is the number of staging runs: one being filled while the
// others are written.
const directRuns = 3

// directAlign is the alignment of the memory, offset and length of a
// write that bypasses the page cache (the logical block size of common
// disks is at most this).
const directAlign = 4096

// direct is a file's staging space while it is written in direct mode,
// and the goroutine that writes the full runs.
type direct struct {
	buf  []byte // staged bytes, at file offset off; cap is directStep
	off  int64
	free chan []byte    // runs to fill
	full chan directRun // runs to write
	done chan struct{}  // closed when the writer has stopped

	mu  sync.Mutex
	err error // the writer's first error
}

// writeAt is (*os.File).WriteAt (a variable for tests).
var writeAt = (*os.File).WriteAt

type directRun struct {
	b   []byte
	off int64
}

// Direct asks that what is written from now on go to the disk without a
// copy into the page cache, where the file system allows it: the bytes
// are staged in aligned runs of 8 MiB, each written in one call by a
// goroutine of the file's own while the next is filled. A large file
// then costs the writing process a copy into the staging space instead
// of the kernel's copy into the page cache and its per-page work. It
// takes effect only before anything is written and is a hint: where the
// file system refuses, the file is written through the page cache, and
// the bytes are the same either way.
func (f *File) Direct() {
	if f.n != 0 || f.direct != nil || !setDirect(f.tmp, true) {
		return
	}
	d := &direct{free: make(chan []byte, directRuns), full: make(chan directRun, directRuns), done: make(chan struct{})}
	raw := make([]byte, directRuns*directStep+directAlign)
	skip := int((directAlign - uintptr(unsafe.Pointer(&raw[0]))%directAlign) % directAlign)
	for k := range directRuns {
		run := raw[skip+k*directStep : skip+k*directStep : skip+(k+1)*directStep]
		if k == 0 {
			d.buf = run
		} else {
			d.free <- run
		}
	}
	go func() {
		defer close(d.done)
		for r := range d.full {
			d.mu.Lock()
			failed := d.err != nil
			d.mu.Unlock()
			if !failed {
				if err := f.writeRun(r.b, r.off); err != nil {
					d.mu.Lock()
					d.err = err
					d.mu.Unlock()
				}
			}
			d.free <- r.b[:0]
		}
	}()
	f.direct = d
}

// writeRun writes b at off; a file system that refuses the write in
// direct mode gets it, and all after it, through the page cache.
func (f *File) writeRun(b []byte, off int64) error {
	if len(b) == 0 {
		return nil
	}
	_, err := writeAt(f.tmp, b, off)
	if err != nil && setDirect(f.tmp, false) {
		_, err = writeAt(f.tmp, b, off)
	}
	if err != nil {
		return fmt.Errorf("write %s: %w", f.path, err)
	}
	return nil
}

// writeDirect stages p, handing each full run to the writer.
func (f *File) writeDirect(p []byte) (int, error) {
	d := f.direct
	written := 0
	for len(p) > 0 {
		c := copy(d.buf[len(d.buf):cap(d.buf)], p)
		d.buf = d.buf[:len(d.buf)+c]
		p = p[c:]
		written += c
		f.n += int64(c)
		if len(d.buf) == cap(d.buf) {
			d.full <- directRun{d.buf, d.off}
			d.off += int64(len(d.buf))
			d.buf = <-d.free
			d.mu.Lock()
			err := d.err
			d.mu.Unlock()
			if err != nil {
				return written, err
			}
		}
	}
	return written, nil
}

// stop waits for the writer to write what it was given and stop,
// and returns its first error.
func (d *direct) stop() error {
	close(d.full)
	<-d.done
	return d.err
}

// endDirect writes what is staged and returns the file to buffered
// writing at its end, as WriteAt and Commit need.
func (f *File) endDirect() error {
	d := f.direct
	if d == nil {
		return nil
	}
	f.direct = nil
	err := d.stop()
	aligned := len(d.buf) &^ (directAlign - 1)
	if err == nil {
		err = f.writeRun(d.buf[:aligned], d.off)
	}
	if err == nil && !setDirect(f.tmp, false) {
		err = fmt.Errorf("write %s: cannot leave direct mode", f.path)
	}
	if err == nil {
		err = f.writeRun(d.buf[aligned:], d.off+int64(aligned))
	}
	if err == nil {
		if _, serr := f.tmp.Seek(f.n, 0); serr != nil {
			err = fmt.Errorf("write %s: %w", f.path, serr)
		}
	}
	return err
}
