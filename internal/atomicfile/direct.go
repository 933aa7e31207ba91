package atomicfile

import (
	"fmt"
	"unsafe"
)

// directStep is the run of bytes a file in direct mode stages and hands
// to the disk in one write: a multiple of directAlign.
const directStep = 8 << 20

// directAlign is the alignment of the memory, offset and length of a
// write that bypasses the page cache (the logical block size of common
// disks is at most this).
const directAlign = 4096

// direct is a file's staging space while it is written in direct mode.
type direct struct {
	buf []byte // staged bytes, at file offset off; cap is directStep
	off int64
}

// Direct asks that what is written from now on go to the disk without a
// copy into the page cache, where the file system allows it: the bytes
// are staged in aligned runs of 8 MiB, each written in one call that
// returns once the disk has it. A large file then costs the writing
// process a copy into the staging space instead of the kernel's copy
// into the page cache and its per-page work. It takes effect only before
// anything is written and is a hint: where the file system refuses, the
// file is written as before, and the bytes are the same either way.
func (f *File) Direct() {
	if f.n != 0 || f.direct != nil || !setDirect(f.tmp, true) {
		return
	}
	raw := make([]byte, directStep+directAlign)
	skip := int((directAlign - uintptr(unsafe.Pointer(&raw[0]))%directAlign) % directAlign)
	f.direct = &direct{buf: raw[skip : skip : skip+directStep]}
}

// writeDirect stages p, writing each full run.
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
			if err := f.flushDirect(len(d.buf)); err != nil {
				return written, err
			}
		}
	}
	return written, nil
}

// flushDirect writes the first n staged bytes (a multiple of
// directAlign, or all of them once direct mode is off) at their offset
// and keeps the rest staged. A file system that refuses the write in
// direct mode gets it, and all after it, through the page cache.
func (f *File) flushDirect(n int) error {
	d := f.direct
	if n == 0 {
		return nil
	}
	_, err := f.tmp.WriteAt(d.buf[:n], d.off)
	if err != nil && setDirect(f.tmp, false) {
		_, err = f.tmp.WriteAt(d.buf[:n], d.off)
	}
	if err != nil {
		return fmt.Errorf("write %s: %w", f.path, err)
	}
	d.off += int64(n)
	d.buf = d.buf[:copy(d.buf[:cap(d.buf)], d.buf[n:])]
	return nil
}

// endDirect writes what is staged and returns the file to buffered
// writing at its end, as WriteAt and Commit need.
func (f *File) endDirect() error {
	if f.direct == nil {
		return nil
	}
	d := f.direct
	err := f.flushDirect(len(d.buf) &^ (directAlign - 1))
	if err == nil && !setDirect(f.tmp, false) {
		err = fmt.Errorf("write %s: cannot leave direct mode", f.path)
	}
	if err == nil {
		err = f.flushDirect(len(d.buf))
	}
	if err == nil {
		if _, serr := f.tmp.Seek(f.n, 0); serr != nil {
			err = fmt.Errorf("write %s: %w", f.path, serr)
		}
	}
	f.direct = nil
	return err
}
