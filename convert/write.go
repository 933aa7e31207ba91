package convert

import (
	"bytes"
	"encoding/json"
	"fmt"
	"maps"
	"math"
	"slices"
	"strconv"
	"unicode/utf8"
)

// WriteTensor is one tensor for WriteFile, or one tensor's layout for
// CreateFile (which does not use Data).
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
// synced and renamed over path; on error nothing is left at path. Invalid
// tensors are refused before anything is written.
func WriteFile(path string, tensors []WriteTensor, metadata map[string]string) error {
	h, sizes, err := encodeHeader(tensors, metadata)
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	for i, t := range tensors {
		if err := checkDataSize(path, t, len(t.Data), sizes[i]); err != nil {
			return err
		}
	}
	w, err := createFile(path, h, tensors, sizes)
	if err != nil {
		return err
	}
	defer w.Abort()
	for _, t := range tensors {
		if err := w.WriteTensor(t.Data); err != nil {
			return err
		}
	}
	return w.Commit()
}

// encodeHeader builds the padded JSON header for tensors laid out in order
// and returns it with each tensor's data size. It does not look at Data.
func encodeHeader(tensors []WriteTensor, metadata map[string]string) ([]byte, []int64, error) {
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
