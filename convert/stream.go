package convert

import (
	"encoding/binary"
	"fmt"

	"ternkit/internal/atomicfile"
)

// FileWriter writes a safetensors file one tensor at a time, so that a
// writer holds one tensor in memory, not the model. Nothing appears at the
// destination until Commit.
type FileWriter struct {
	path    string
	f       *atomicfile.File
	tensors []WriteTensor
	sizes   []int64
	next    int
}

// CreateFile starts a safetensors file at path laid out as WriteFile lays
// out tensors; only their Name, DType and Shape are used. Write each
// tensor's data with WriteTensor, in order, then Commit. Abort (typically
// deferred) removes the temporary file unless Commit succeeded.
func CreateFile(path string, tensors []WriteTensor, metadata map[string]string) (*FileWriter, error) {
	h, sizes, err := encodeHeader(tensors, metadata)
	if err != nil {
		return nil, fmt.Errorf("write %s: %w", path, err)
	}
	return createFile(path, h, tensors, sizes)
}

func createFile(path string, header []byte, tensors []WriteTensor, sizes []int64) (*FileWriter, error) {
	f, err := atomicfile.Create(path, 0o644)
	if err != nil {
		return nil, err
	}
	w := &FileWriter{path: path, f: f, tensors: tensors, sizes: sizes}
	prefix := binary.LittleEndian.AppendUint64(make([]byte, 0, headerStart+len(header)), uint64(len(header)))
	if _, err := f.Write(append(prefix, header...)); err != nil {
		f.Abort()
		return nil, err
	}
	return w, nil
}

// WriteTensor writes the data of the next tensor; its length must be the
// tensor's product(shape) × dtype size.
func (w *FileWriter) WriteTensor(data []byte) error {
	if w.next >= len(w.tensors) {
		return fmt.Errorf("write %s: %w: data for %d tensors, the header has %d", w.path, ErrOffsets, w.next+1, len(w.tensors))
	}
	if err := checkDataSize(w.path, w.tensors[w.next], len(data), w.sizes[w.next]); err != nil {
		return err
	}
	w.next++
	_, err := w.f.Write(data)
	return err
}

// Commit checks that every tensor was written, then syncs the file and
// renames it into place.
func (w *FileWriter) Commit() error {
	if w.next != len(w.tensors) {
		return fmt.Errorf("write %s: %w: data for %d of %d tensors", w.path, ErrOffsets, w.next, len(w.tensors))
	}
	return w.f.Commit()
}

// Abort removes the temporary file unless Commit succeeded.
func (w *FileWriter) Abort() { w.f.Abort() }

func checkDataSize(path string, t WriteTensor, got int, want int64) error {
	if int64(got) == want {
		return nil
	}
	return fmt.Errorf("write %s: tensor %q: %w: data is %d bytes, shape %v × %s needs %d",
		path, t.Name, ErrOffsets, got, t.Shape, t.DType, want)
}
