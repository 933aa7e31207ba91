package convert

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"maps"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"unicode/utf8"
)

// WriteTensor is one tensor for WriteFile.
type WriteTensor struct {
	Name  string
	DType string
	Shape []int64
	Data  []byte // little-endian, len must equal product(shape)×size
}

// TensorSpec describes one tensor for Create: its data is written later.
type TensorSpec struct {
	Name  string
	DType string
	Shape []int64
}

// WriteFile writes a safetensors file at path holding tensors in the given
// order, with data offsets contiguous from 0, the JSON header padded with
// spaces to a multiple of 8 bytes, and "__metadata__" when metadata is not
// nil. The write is atomic: a temporary file in the destination directory is
// synced and renamed over path; on error nothing is left at path.
func WriteFile(path string, tensors []WriteTensor, metadata map[string]string) error {
	specs := make([]TensorSpec, len(tensors))
	for i, t := range tensors {
		specs[i] = TensorSpec{Name: t.Name, DType: t.DType, Shape: t.Shape}
	}
	h, sizes, err := encodeHeader(specs, metadata)
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	for i, t := range tensors {
		if int64(len(t.Data)) != sizes[i] {
			return fmt.Errorf("write %s: tensor %q: %w: data is %d bytes, shape %v × %s needs %d",
				path, t.Name, ErrOffsets, len(t.Data), t.Shape, t.DType, sizes[i])
		}
	}
	w, err := create(path, h, sizes)
	if err != nil {
		return err
	}
	for _, t := range tensors {
		if _, err := w.Write(t.Data); err != nil {
			break // Close reports it and cleans up
		}
	}
	return w.Close()
}

// Writer streams the data section of a safetensors file whose header is
// fixed when it is created, so that a file larger than memory can be
// written piece by piece. It writes to a temporary file beside the
// destination; Close renames it into place.
type Writer struct {
	path  string
	tmp   *os.File
	bw    *bufio.Writer
	left  int64 // data bytes still expected
	err   error // first write error
	total int64
}

// Create starts a safetensors file at path holding tensors in the given
// order, laid out as WriteFile lays them out. The caller writes every
// tensor's bytes, in order, with Write, then calls Close. Nothing appears at
// path until Close succeeds.
func Create(path string, tensors []TensorSpec, metadata map[string]string) (*Writer, error) {
	h, sizes, err := encodeHeader(tensors, metadata)
	if err != nil {
		return nil, fmt.Errorf("write %s: %w", path, err)
	}
	return create(path, h, sizes)
}

func create(path string, h []byte, sizes []int64) (*Writer, error) {
	var total int64 // encodeHeader checked that the sum fits
	for _, n := range sizes {
		total += n
	}
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := os.CreateTemp(dir, "."+base+".tmp-*")
	if err != nil {
		return nil, fmt.Errorf("write %s: %w", path, err)
	}
	w := &Writer{path: path, tmp: tmp, bw: bufio.NewWriterSize(tmp, 1<<20), left: total, total: total}
	var lenField [headerStart]byte
	binary.LittleEndian.PutUint64(lenField[:], uint64(len(h)))
	w.bw.Write(lenField[:])
	if _, err := w.bw.Write(h); err != nil {
		w.err = err
	}
	return w, nil
}

// Write appends p to the data section. Writing more bytes than the tensors
// hold is an error.
func (w *Writer) Write(p []byte) (int, error) {
	if w.err != nil {
		return 0, w.err
	}
	if int64(len(p)) > w.left {
		w.err = fmt.Errorf("write %s: %w: %d more bytes than the %d-byte data section holds", w.path, ErrOffsets, int64(len(p))-w.left, w.total)
		return 0, w.err
	}
	n, err := w.bw.Write(p)
	w.left -= int64(n)
	if err != nil {
		w.err = fmt.Errorf("write %s: %w", w.path, err)
	}
	return n, w.err
}

// Close finishes the file: when every data byte was written and no write
// failed, it flushes, syncs and renames the temporary file to the
// destination. Otherwise it removes the temporary file and returns the
// reason, so a caller that gives up early calls Close to clean up.
func (w *Writer) Close() (err error) {
	if w.tmp == nil {
		return fmt.Errorf("write %s: already closed", w.path)
	}
	tmp := w.tmp
	w.tmp = nil
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	if w.err != nil {
		return w.err
	}
	if w.left != 0 {
		return fmt.Errorf("write %s: %w: %d of %d data bytes written", w.path, ErrTruncated, w.total-w.left, w.total)
	}
	wrap := func(err error) error { return fmt.Errorf("write %s: %w", w.path, err) }
	if err := w.bw.Flush(); err != nil {
		return wrap(err)
	}
	if err := tmp.Chmod(0o644); err != nil {
		return wrap(err)
	}
	if err := tmp.Sync(); err != nil {
		return wrap(err)
	}
	if err := tmp.Close(); err != nil {
		return wrap(err)
	}
	if err := os.Rename(tmp.Name(), w.path); err != nil {
		return wrap(err)
	}
	// Make the rename durable; the file is complete either way.
	if d, derr := os.Open(filepath.Dir(w.path)); derr == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// encodeHeader builds the padded JSON header for tensors laid out in order
// and returns it with each tensor's data size.
func encodeHeader(tensors []TensorSpec, metadata map[string]string) ([]byte, []int64, error) {
	var b bytes.Buffer
	b.WriteByte('{')
	if metadata != nil {
		b.WriteString(`"` + metadataKey + `":{`)
		for i, k := range slices.Sorted(maps.Keys(metadata)) {
			v := metadata[k]
			if !utf8.ValidString(k) || !utf8.ValidString(v) {
				return nil, nil, fmt.Errorf("%w: %q entry %q is not valid UTF-8", ErrHeader, metadataKey, k)
			}
			if i > 0 {
				b.WriteByte(',')
			}
			writeJSONString(&b, k)
			b.WriteByte(':')
			writeJSONString(&b, v)
		}
		b.WriteByte('}')
	}
	seen := make(map[string]bool, len(tensors))
	sizes := make([]int64, 0, len(tensors))
	var offset int64
	for _, t := range tensors {
		switch {
		case t.Name == metadataKey:
			return nil, nil, fmt.Errorf("%w: tensor name %q is reserved", ErrHeader, t.Name)
		case !utf8.ValidString(t.Name):
			return nil, nil, fmt.Errorf("%w: tensor name %q is not valid UTF-8", ErrHeader, t.Name)
		case seen[t.Name]:
			return nil, nil, fmt.Errorf("%w: duplicate tensor name %q", ErrHeader, t.Name)
		}
		seen[t.Name] = true
		size, ok := dtypeSizes[t.DType]
		if !ok {
			return nil, nil, fmt.Errorf("tensor %q: %w: %q", t.Name, ErrDType, t.DType)
		}
		for _, d := range t.Shape {
			if d < 0 {
				return nil, nil, fmt.Errorf("tensor %q: %w: shape %v has a negative dimension", t.Name, ErrHeader, t.Shape)
			}
		}
		n, ok := shapeBytes(t.Shape, int64(size))
		if !ok {
			return nil, nil, fmt.Errorf("tensor %q: %w: shape %v × %s overflows 64-bit size", t.Name, ErrHeader, t.Shape, t.DType)
		}
		if n > math.MaxInt64-offset {
			return nil, nil, fmt.Errorf("tensor %q: %w: data offsets pass 64-bit size", t.Name, ErrHeader)
		}
		sizes = append(sizes, n)
		if b.Len() > 1 {
			b.WriteByte(',')
		}
		writeJSONString(&b, t.Name)
		b.WriteString(`:{"dtype":`)
		writeJSONString(&b, t.DType)
		b.WriteString(`,"shape":[`)
		for j, d := range t.Shape {
			if j > 0 {
				b.WriteByte(',')
			}
			b.WriteString(strconv.FormatInt(d, 10))
		}
		b.WriteString(`],"data_offsets":[`)
		b.WriteString(strconv.FormatInt(offset, 10))
		b.WriteByte(',')
		b.WriteString(strconv.FormatInt(offset+n, 10))
		b.WriteString("]}")
		offset += n
	}
	b.WriteByte('}')
	for b.Len()%8 != 0 {
		b.WriteByte(' ')
	}
	if b.Len() > maxHeaderLen {
		return nil, nil, fmt.Errorf("%w: header of %d bytes exceeds the cap of %d", ErrHeader, b.Len(), maxHeaderLen)
	}
	return b.Bytes(), sizes, nil
}

// writeJSONString appends s as a JSON string.
func writeJSONString(b *bytes.Buffer, s string) {
	q, _ := json.Marshal(s) // a string always marshals
	b.Write(q)
}
