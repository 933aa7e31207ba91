package convert

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"

	"github.com/zeebo/blake3"

	"ternkit/internal/inputfile"
)

// Tensor describes one tensor of a source (no data).
type Tensor struct {
	Name   string
	DType  string  // exactly as in the header, e.g. "BF16"
	Shape  []int64 // empty for a scalar
	File   string  // path of the file holding it
	Offset int64   // absolute byte offset of its first data byte in File
	Length int64   // data bytes

	entryAt int64 // absolute offset of its header entry in File
}

// NumElements returns the product of the shape (1 for a scalar).
func (t *Tensor) NumElements() int64 {
	n := int64(1)
	for _, d := range t.Shape {
		n *= d
	}
	return n
}

// IsFloat reports whether the tensor holds F64, F32, F16 or BF16 values.
func (t *Tensor) IsFloat() bool { return isFloatDType(t.DType) }

// KnownDType reports whether the tensor's dtype is one this package knows
// the element size of. A tensor of an unknown dtype was accepted on its
// offsets alone; it can be kept byte for byte, never ternarized.
func (t *Tensor) KnownDType() bool {
	_, ok := dtypeSizes[t.DType]
	return ok
}

// Ternarizable reports whether the tensor's dtype can be decoded for
// ternarization: F64, F32, F16, BF16, F8_E4M3 or F8_E5M2. Integer and BOOL
// tensors and tensors of a dtype this package does not know are only ever
// kept.
func (t *Tensor) Ternarizable() bool { return isDecodableDType(t.DType) }

// DecodeWeights decodes raw, the tensor's bytes as Walk gives them, into
// dst (one float32 per element) for ternarization. Errors are
// *InputError values naming the file, the tensor and the byte offset:
// ErrDType when the dtype cannot be ternarized (integer, BOOL or unknown),
// ErrNonFinite at the first NaN or infinity, including an F64 value too
// large for float32, which the message reports as an overflow.
func (t *Tensor) DecodeWeights(raw []byte, dst []float32) error {
	return t.DecodeWeightsAt(raw, 0, dst)
}

// DecodeWeightsAt is DecodeWeights for a piece of the tensor whose first
// element is element first: errors name the element and byte offset in
// the whole tensor.
func (t *Tensor) DecodeWeightsAt(raw []byte, first int, dst []float32) error {
	if !t.Ternarizable() {
		why := "integer and BOOL tensors are always kept, never ternarized"
		if !t.KnownDType() {
			why = "a dtype this version does not know can be kept byte for byte, never ternarized"
		}
		return inputError(t.File, t.Name, t.Offset, ErrDType, "dtype %q: %s", t.DType, why)
	}
	if t.DType == "BF16" && len(raw) == 2*len(dst) {
		// the common case in one pass: decode, and note a non-finite value
		// (exponent bits all set) without a branch
		if !decodeBF16(dst, raw) {
			return nil
		}
	} else if err := DecodeFloat32(t.DType, raw, dst); err != nil {
		return &InputError{File: t.File, Tensor: t.Name, Offset: t.Offset, Err: err}
	}
	// A float32 is NaN or ±Inf exactly when its exponent bits are all set:
	// one branch-free pass finds whether any is, a second finds the first.
	var nonFinite uint32
	for _, v := range dst {
		// x is 0 exactly for a non-finite value, and below 2^31, so x−1 has
		// its top bit set exactly then
		x := ^math.Float32bits(v) & 0x7f800000
		nonFinite |= (x - 1) & 0x80000000
	}
	if nonFinite == 0 {
		return nil
	}
	for i, v := range dst {
		if !math.IsNaN(float64(v)) && !math.IsInf(float64(v), 0) {
			continue
		}
		size := int64(dtypeSizes[t.DType])
		at := t.Offset + int64(first+i)*size
		if t.DType == "F64" {
			if src := math.Float64frombits(binary.LittleEndian.Uint64(raw[8*i:])); !math.IsNaN(src) && !math.IsInf(src, 0) {
				return inputError(t.File, t.Name, at, ErrNonFinite, "element %d: F64 value %g overflows float32 to %v", first+i, src, v)
			}
		}
		return inputError(t.File, t.Name, at, ErrNonFinite, "element %d is %v", first+i, v)
	}
	return nil
}

// SourceFile is one file of a source; BLAKE3 is filled in by Walk.
type SourceFile struct {
	Path   string
	Size   int64
	BLAKE3 [32]byte
}

// Source is an opened checkpoint: one safetensors file, or every shard of a
// sharded set read as one model.
type Source struct {
	Path     string            // the file or index read (a directory resolves to one)
	Files    []SourceFile      // the files holding tensors; shards in name order
	Metadata map[string]string // "__metadata__" (merged over shards), may be nil
	Tensors  []*Tensor         // file order, then data-offset order
	Warnings []string          // problems that do not stop reading, e.g. an index total_size that disagrees

	open []*openFile // parallel to Files; nil once closed
}

// openFile is the reading state of one file of a source.
type openFile struct {
	f         *os.File
	prefix    *blake3.Hasher // state after hashing the length field and header
	dataStart int64
	dataLen   int64
	tensors   []*Tensor
}

// openSingle parses and validates the header of the safetensors file at
// path.
func openSingle(path string, lim Limits) (*Source, error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return nil, openError(path, err)
	}
	of, size, md, err := readHeader(path, f, lim)
	if err != nil {
		f.Close()
		return nil, err
	}
	return &Source{
		Path:     path,
		Files:    []SourceFile{{Path: path, Size: size}},
		Metadata: md,
		Tensors:  of.tensors,
		open:     []*openFile{of},
	}, nil
}

// openError reports a file that cannot be opened, without repeating its
// path.
func openError(path string, err error) *InputError {
	var pe *os.PathError
	if errors.As(err, &pe) {
		err = pe.Err
	}
	return &InputError{File: path, Offset: -1, Err: fmt.Errorf("open: %w", err)}
}

// readHeader reads and validates the length field and header of f, leaving
// the file open.
func readHeader(path string, f *os.File, lim Limits) (*openFile, int64, map[string]string, error) {
	fi, err := f.Stat()
	if err != nil {
		return nil, 0, nil, &InputError{File: path, Offset: -1, Err: fmt.Errorf("stat: %w", err)}
	}
	if fi.IsDir() {
		return nil, 0, nil, inputError(path, "", -1, ErrHeader, "is a directory")
	}
	size := fi.Size()
	if size < headerStart {
		return nil, 0, nil, inputError(path, "", 0, ErrTruncated,
			"file is %d bytes, shorter than the %d-byte header length", size, headerStart)
	}
	var lenField [headerStart]byte
	if _, err := io.ReadFull(f, lenField[:]); err != nil {
		return nil, 0, nil, inputError(path, "", 0, ErrTruncated, "reading header length: %v", err)
	}
	n := binary.LittleEndian.Uint64(lenField[:])
	if n > uint64(lim.MaxHeaderBytes) {
		return nil, 0, nil, inputError(path, "", 0, ErrHeader,
			"header length %d exceeds the cap of %d bytes", n, lim.MaxHeaderBytes)
	}
	if n > uint64(size-headerStart) {
		return nil, 0, nil, inputError(path, "", 0, ErrTruncated,
			"header length %d exceeds the %d bytes after the length field", n, size-headerStart)
	}
	h := make([]byte, n) // n ≤ min(cap, size)
	if got, err := io.ReadFull(f, h); err != nil {
		return nil, 0, nil, inputError(path, "", headerStart+int64(got), ErrTruncated,
			"read %d of %d header bytes: %v", got, n, err)
	}
	hdr, err := parseHeader(path, h, lim.MaxTensors)
	if err != nil {
		return nil, 0, nil, err
	}
	dataStart := headerStart + int64(n)
	dataLen := size - dataStart
	tensors, err := layoutTensors(path, hdr.entries, dataStart, dataLen)
	if err != nil {
		return nil, 0, nil, err
	}
	prefix := blake3.New()
	prefix.Write(lenField[:])
	prefix.Write(h)
	return &openFile{f: f, prefix: prefix, dataStart: dataStart, dataLen: dataLen, tensors: tensors}, size, hdr.metadata, nil
}

// Close closes the files of the source. Closing twice is harmless.
func (s *Source) Close() error {
	var first error
	for _, of := range s.open {
		if err := of.f.Close(); err != nil && first == nil {
			first = err
		}
	}
	s.open = nil
	return first
}

// errClosed reports a Walk after Close.
var errClosed = errors.New("source is closed")

// Walk reads every tensor's bytes once, in Tensors order, with one reusable
// buffer as large as the largest tensor, and calls fn with the bytes and
// their BLAKE3 sum. raw is valid only during the call. The same read feeds a
// per-file hasher, so after Walk each Files[i].BLAKE3 is the BLAKE3 of the
// whole file. A short read gives an *InputError wrapping ErrTruncated; an
// error from fn is returned unchanged.
func (s *Source) Walk(fn func(t *Tensor, raw []byte, sum [32]byte) error) error {
	if s.open == nil {
		return &InputError{File: s.Path, Offset: -1, Err: errClosed}
	}
	var largest int64
	for _, t := range s.Tensors {
		largest = max(largest, t.Length)
	}
	buf := make([]byte, largest)
	for i, of := range s.open {
		path := s.Files[i].Path
		fileHash := of.prefix.Clone()
		for _, t := range of.tensors {
			raw := buf[:t.Length]
			got, err := of.f.ReadAt(raw, t.Offset)
			if got < len(raw) {
				if err == nil || errors.Is(err, io.EOF) {
					err = io.ErrUnexpectedEOF
				}
				return &InputError{File: path, Tensor: t.Name, Offset: t.Offset + int64(got),
					Err: fmt.Errorf("%w: read %d of %d bytes: %w", ErrTruncated, got, len(raw), err)}
			}
			fileHash.Write(raw)
			if err := fn(t, raw, blake3.Sum256(raw)); err != nil {
				return err
			}
		}
		end := of.dataStart + of.dataLen
		var probe [1]byte
		if got, _ := of.f.ReadAt(probe[:], end); got > 0 {
			return inputError(path, "", end, ErrOffsets, "trailing bytes after the last tensor (the file grew after it was opened)")
		}
		copy(s.Files[i].BLAKE3[:], fileHash.Sum(nil))
	}
	return nil
}
