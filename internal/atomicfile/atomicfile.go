// Package atomicfile writes files so that the destination holds either what
// it held before or the complete new file, never a part: data goes to a
// temporary file in the destination's directory, which is flushed, synced
// and then renamed (or linked) into place, and the directory is synced. On
// any error the temporary file is removed.
//
// A temporary file is named ".NAME.tmp-PID-RANDOM" after the destination
// NAME and the writing process's PID. A process killed before it could
// clean up leaves its temporary file behind; the next Create for the same
// destination removes such stale files, but only those whose PID names no
// running process, so a concurrent writer's file is never touched.
package atomicfile

import (
	"bufio"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// File is a file being written; nothing appears at its path until Commit.
type File struct {
	path string
	// keep is the mode of the regular file being replaced, if any
	keep *fs.FileMode
	tmp  *os.File
	bw   *bufio.Writer
	n    int64
	done bool
	// kicked is the end of the bytes whose writeback has been started
	kicked int64
	// direct is the staging space in direct mode (Direct), or nil
	direct *direct
}

// writebackStep is how many bytes handed to the kernel start their
// writeback together, so that writing to the disk overlaps the work that
// produces the file instead of all waiting for Commit's fsync.
const writebackStep = 8 << 20

// Create starts writing path. A new file gets mode perm less the umask; a
// file being replaced keeps its mode. A path that exists and is not a
// regular file (a directory, a named pipe, a device) is refused with an
// error wrapping ErrNotRegular, before anything is written. Call Abort
// (typically deferred) to clean up on error.
func Create(path string, perm fs.FileMode) (*File, error) {
	keep, err := checkDestination(path)
	if err != nil {
		return nil, err
	}
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	RemoveStale(path)
	tmp, err := createTemp(dir, tempPrefix(base)+strconv.Itoa(os.Getpid())+"-", perm)
	if err != nil {
		var pe *fs.PathError
		if errors.As(err, &pe) {
			err = pe.Err // the temporary name means nothing to the caller
		}
		return nil, fmt.Errorf("write %s: create a file in %s: %w", path, dir, err)
	}
	return &File{path: path, keep: keep, tmp: tmp, bw: bufio.NewWriterSize(tmp, 1<<20)}, nil
}

// createTemp creates a new file named prefix and a random number in dir,
// with mode perm less the umask (the kernel applies it, as for any new
// file).
func createTemp(dir, prefix string, perm fs.FileMode) (*os.File, error) {
	for try := 0; ; try++ {
		name := filepath.Join(dir, prefix+strconv.FormatUint(uint64(rand.Uint32()), 10))
		f, err := os.OpenFile(name, os.O_RDWR|os.O_CREATE|os.O_EXCL, perm)
		if errors.Is(err, fs.ErrExist) && try < 100 {
			continue
		}
		return f, err
	}
}

// Write buffers p for the temporary file. A large p goes to the kernel in
// steps, each one's writeback started as it is handed over, so that the
// disk works while the rest is copied.
func (f *File) Write(p []byte) (int, error) {
	if f.direct != nil {
		return f.writeDirect(p)
	}
	written := 0
	for len(p) > 0 {
		step := p[:min(len(p), writebackStep)]
		n, err := f.bw.Write(step)
		f.n += int64(n)
		written += n
		if err != nil {
			return written, fmt.Errorf("write %s: %w", f.path, err)
		}
		if handed := f.n - int64(f.bw.Buffered()); handed-f.kicked >= writebackStep {
			startWriteback(f.tmp, f.kicked, handed-f.kicked)
			f.kicked = handed
		}
		p = p[n:]
	}
	return written, nil
}

// WriteAt overwrites bytes already written, at offset off, as a writer
// does to fill in a header once the rest is known. Buffered data is flushed
// first; it does not move the end where Write appends.
func (f *File) WriteAt(p []byte, off int64) error {
	if off < 0 || off+int64(len(p)) > f.n {
		return fmt.Errorf("write %s: %d bytes at %d lie outside the %d written", f.path, len(p), off, f.n)
	}
	err := f.endDirect()
	if err == nil {
		err = f.bw.Flush()
	}
	if err == nil {
		_, err = f.tmp.WriteAt(p, off)
	}
	if err != nil {
		return fmt.Errorf("write %s: %w", f.path, err)
	}
	return nil
}

// Written is the number of bytes written so far.
func (f *File) Written() int64 { return f.n }

// Commit makes the file appear at its path, replacing what was there.
func (f *File) Commit() error {
	return f.commit(func(tmp string) error { return os.Rename(tmp, f.path) })
}

// CommitNew makes the file appear at its path only if nothing is there; an
// existing file is left alone and the error wraps fs.ErrExist.
func (f *File) CommitNew() error {
	return f.commit(func(tmp string) error {
		if err := os.Link(tmp, f.path); err != nil {
			return err
		}
		return os.Remove(tmp)
	})
}

func (f *File) commit(place func(tmp string) error) error {
	if f.done {
		return fmt.Errorf("write %s: %w", f.path, errors.New("already committed"))
	}
	err := f.endDirect()
	if err == nil {
		err = f.bw.Flush()
	}
	if err == nil && f.keep != nil {
		err = f.tmp.Chmod(*f.keep)
	}
	if err == nil {
		err = f.tmp.Sync()
	}
	if cerr := f.tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = place(f.tmp.Name())
	}
	if err != nil {
		os.Remove(f.tmp.Name())
		f.done = true
		return fmt.Errorf("write %s: %w", f.path, err)
	}
	f.done = true
	// Make the new name durable; the file is complete either way, and some
	// filesystems refuse a directory sync.
	if d, err := os.Open(filepath.Dir(f.path)); err == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// Abort removes the temporary file unless the file was committed. It is
// safe to call more than once.
func (f *File) Abort() {
	if f.done {
		return
	}
	f.done = true
	if f.direct != nil {
		f.direct.stop()
		f.direct = nil
	}
	f.tmp.Close()
	os.Remove(f.tmp.Name())
}

// WriteFile writes data to path atomically, replacing what was there (and
// keeping its mode) or creating it with mode perm less the umask.
func WriteFile(path string, data []byte, perm fs.FileMode) error {
	return write(path, data, perm, (*File).Commit)
}

// WriteNewFile writes data to path atomically with mode perm less the
// umask, and fails
// with an error wrapping fs.ErrExist if path exists.
func WriteNewFile(path string, data []byte, perm fs.FileMode) error {
	return write(path, data, perm, (*File).CommitNew)
}

func write(path string, data []byte, perm fs.FileMode, commit func(*File) error) error {
	f, err := Create(path, perm)
	if err != nil {
		return err
	}
	defer f.Abort()
	if _, err := f.Write(data); err != nil {
		return err
	}
	return commit(f)
}

// tempPrefix starts the name of every temporary file for destination base.
func tempPrefix(base string) string { return "." + base + ".tmp-" }

// RemoveStale removes the temporary files that writers of path left behind
// when they were killed: those named after path whose creator PID names no
// running process. Files of running writers, this process included, are
// kept. It is best effort and returns the names it removed.
func RemoveStale(path string) []string {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil
	}
	var removed []string
	prefix := tempPrefix(base)
	for _, e := range entries {
		rest, ok := strings.CutPrefix(e.Name(), prefix)
		if !ok || !e.Type().IsRegular() {
			continue
		}
		digits, _, ok := strings.Cut(rest, "-")
		pid, err := strconv.Atoi(digits)
		if !ok || err != nil || pid <= 0 || pid == os.Getpid() || processRuns(pid) {
			continue
		}
		if os.Remove(filepath.Join(dir, e.Name())) == nil {
			removed = append(removed, e.Name())
		}
	}
	return removed
}
