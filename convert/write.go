package convert

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
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

// WriteFile writes a safetensors file at path holding tensors in the given
// order, with data offsets contiguous from 0, the JSON header padded with
// spaces to a multiple of 8 bytes, and "__metadata__" when metadata is not
// nil. The write is atomic: a temporary file in the destination directory is
// synced and renamed over path; on error nothing is left at path.
func WriteFile(path string, tensors []WriteTensor, metadata map[string]string) (err error) {
	h, err := encodeHeader(tensors, metadata)
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := os.CreateTemp(dir, "."+base+".tmp-*")
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
			err = fmt.Errorf("write %s: %w", path, err)
		}
	}()
	w := bufio.NewWriterSize(tmp, 1<<20)
	var lenField [headerStart]byte
	binary.LittleEndian.PutUint64(lenField[:], uint64(len(h)))
	w.Write(lenField[:])
	w.Write(h)
	for _, t := range tensors {
		w.Write(t.Data)
	}
	if err := w.Flush(); err != nil {
		return err
	}
	if err := tmp.Chmod(0o644); err != nil {
		return err
	}
	if err := tmp.Sync(); err != nil {
		return err
	}
	if err := tmp.Close(); err != nil {
		return err
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return err
	}
	// Make the rename durable; the file is complete either way.
	if d, derr := os.Open(dir); derr == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// encodeHeader builds the padded JSON header for tensors laid out in order.
func encodeHeader(tensors []WriteTensor, metadata map[string]string) ([]byte, error) {
	var b bytes.Buffer
	b.WriteByte('{')
	if metadata != nil {
		b.WriteString(`"` + metadataKey + `":{`)
		keys := make([]string, 0, len(metadata))
		for k := range metadata {
			keys = append(keys, k)
		}
		slices.Sort(keys)
		for i, k := range keys {
			v := metadata[k]
			if !utf8.ValidString(k) || !utf8.ValidString(v) {
				return nil, fmt.Errorf("%w: %q entry %q is not valid UTF-8", ErrHeader, metadataKey, k)
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
	var offset int64
	for _, t := range tensors {
		switch {
		case t.Name == metadataKey:
			return nil, fmt.Errorf("%w: tensor name %q is reserved", ErrHeader, t.Name)
		case !utf8.ValidString(t.Name):
			return nil, fmt.Errorf("%w: tensor name %q is not valid UTF-8", ErrHeader, t.Name)
		case seen[t.Name]:
			return nil, fmt.Errorf("%w: duplicate tensor name %q", ErrHeader, t.Name)
		}
		seen[t.Name] = true
		size, ok := dtypeSizes[t.DType]
		if !ok {
			return nil, fmt.Errorf("tensor %q: %w: %q", t.Name, ErrDType, t.DType)
		}
		for _, d := range t.Shape {
			if d < 0 {
				return nil, fmt.Errorf("tensor %q: %w: shape %v has a negative dimension", t.Name, ErrHeader, t.Shape)
			}
		}
		n, ok := shapeBytes(t.Shape, int64(size))
		if !ok {
			return nil, fmt.Errorf("tensor %q: %w: shape %v × %s overflows 64-bit size", t.Name, ErrHeader, t.Shape, t.DType)
		}
		if int64(len(t.Data)) != n {
			return nil, fmt.Errorf("tensor %q: %w: data is %d bytes, shape %v × %s needs %d", t.Name, ErrOffsets, len(t.Data), t.Shape, t.DType, n)
		}
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
		return nil, fmt.Errorf("%w: header of %d bytes exceeds the cap of %d", ErrHeader, b.Len(), maxHeaderLen)
	}
	return b.Bytes(), nil
}

// writeJSONString appends s as a JSON string.
func writeJSONString(b *bytes.Buffer, s string) {
	q, _ := json.Marshal(s) // a string always marshals
	b.Write(q)
}
