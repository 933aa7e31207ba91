package convert

import (
	"bytes"
	"cmp"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/bits"
	"slices"
	"strconv"
	"unicode/utf8"
)

// safetensors layout: an 8-byte little-endian header length N, N bytes of
// UTF-8 JSON, then the data section. Tensor offsets are relative to the data
// section.
const (
	headerStart  = 8           // byte offset of the JSON header
	maxHeaderLen = 100_000_000 // cap on N, checked before allocating
	metadataKey  = "__metadata__"
)

// headerEntry is one tensor as the header describes it.
type headerEntry struct {
	name       string
	dtype      string
	shape      []int64
	begin, end int64 // relative to the data section
	nbytes     int64 // product(shape) × dtype size, -1 for an unknown dtype
	count      int64 // product(shape), set for an unknown dtype
	at         int64 // absolute offset of the entry's '{'
}

// header is a parsed and field-validated JSON header.
type header struct {
	metadata map[string]string
	entries  []headerEntry
}

// headerParser walks a JSON document (a safetensors header or a shard
// index) token by token, so that every problem can be located at an absolute
// byte offset and duplicate keys are seen.
type headerParser struct {
	file string
	h    []byte
	dec  *json.Decoder
	base int64 // absolute offset of h[0] in file
	bad  error // sentinel for malformed JSON and wrong structure
}

// newJSONParser checks that h, found at offset base of file, is UTF-8 and
// returns a parser over it whose structural errors wrap bad.
func newJSONParser(file string, h []byte, base int64, bad error, what string) (*headerParser, error) {
	if !utf8.Valid(h) {
		i := 0
		for i < len(h) {
			r, n := utf8.DecodeRune(h[i:])
			if r == utf8.RuneError && n <= 1 {
				break
			}
			i += n
		}
		return nil, inputError(file, "", base+int64(i), bad, "%s is not valid UTF-8 (byte 0x%02x)", what, h[i])
	}
	dec := json.NewDecoder(bytes.NewReader(h))
	dec.UseNumber()
	return &headerParser{file: file, h: h, dec: dec, base: base, bad: bad}, nil
}

// parseHeader decodes and validates h, the JSON header of file. It checks
// UTF-8, JSON syntax, the shape of every entry, dtypes, and that each shape's
// byte size fits in int64; data offsets are checked by layoutTensors. More
// than maxTensors entries is an error, found before the next is parsed.
func parseHeader(file string, h []byte, maxTensors int) (*header, error) {
	p, err := newJSONParser(file, h, headerStart, ErrHeader, "header")
	if err != nil {
		return nil, err
	}
	return p.parse(maxTensors)
}

func (p *headerParser) fail(tensor string, at int64, sentinel error, format string, args ...any) error {
	return inputError(p.file, tensor, at, sentinel, format, args...)
}

// next returns the next token and the absolute offset where it starts.
func (p *headerParser) next(tensor string) (json.Token, int64, error) {
	pos := p.dec.InputOffset()
	for pos < int64(len(p.h)) {
		switch p.h[pos] {
		case ' ', '\t', '\n', '\r', ':', ',':
			pos++
			continue
		}
		break
	}
	at := p.base + pos
	tok, err := p.dec.Token()
	if err == nil {
		return tok, at, nil
	}
	off, detail := p.syntaxError(at)
	return nil, at, p.fail(tensor, off, p.bad, "malformed JSON: %s", detail)
}

// syntaxError locates the first JSON syntax error in the document with a full
// validating scan (the token stream does not report offsets reliably) and
// returns its absolute offset and description. at is the fallback offset.
func (p *headerParser) syntaxError(at int64) (int64, string) {
	err := json.Unmarshal(p.h, new(json.RawMessage))
	var se *json.SyntaxError
	if !errors.As(err, &se) {
		return at, "unexpected end of header"
	}
	// Offset counts the bytes scanned, the offending one included; at the
	// end of input it is the input length.
	off := se.Offset
	if off > int64(len(p.h)) {
		off = int64(len(p.h))
	}
	if off > 0 && !(off == int64(len(p.h)) && se.Error() == "unexpected end of JSON input") {
		off--
	}
	return p.base + off, se.Error()
}

// describe names a token for error messages.
func describe(tok json.Token) string {
	switch v := tok.(type) {
	case json.Delim:
		switch v {
		case '{':
			return "an object"
		case '[':
			return "an array"
		}
		return fmt.Sprintf("%q", string(v))
	case string:
		return fmt.Sprintf("string %q", v)
	case json.Number:
		return "number " + v.String()
	case bool:
		return fmt.Sprintf("boolean %v", v)
	case nil:
		return "null"
	}
	return fmt.Sprintf("%v", tok)
}

// expectDelim reads the next token and requires it to be d.
func (p *headerParser) expectDelim(tensor string, d json.Delim, what string) (int64, error) {
	tok, at, err := p.next(tensor)
	if err != nil {
		return at, err
	}
	if got, ok := tok.(json.Delim); !ok || got != d {
		return at, p.fail(tensor, at, p.bad, "%s must be %s, found %s", what, describe(d), describe(tok))
	}
	return at, nil
}

func (p *headerParser) parse(maxTensors int) (*header, error) {
	tok, at, err := p.next("")
	if err != nil {
		return nil, err
	}
	if d, ok := tok.(json.Delim); !ok || d != '{' {
		return nil, p.fail("", at, ErrHeader, "header must be a JSON object, found %s", describe(tok))
	}
	hdr := &header{}
	seen := make(map[string]bool)
	for p.dec.More() {
		tok, at, err := p.next("")
		if err != nil {
			return nil, err
		}
		key, _ := tok.(string) // object keys are always strings
		tensor := key
		if key == metadataKey {
			tensor = ""
		}
		if seen[key] {
			return nil, p.fail(tensor, at, ErrHeader, "duplicate key %q", key)
		}
		seen[key] = true
		if key == metadataKey {
			if hdr.metadata, err = p.parseMetadata(); err != nil {
				return nil, err
			}
			continue
		}
		if len(hdr.entries) == maxTensors {
			return nil, p.fail(key, at, ErrHeader, "more than %d tensors, over the limit", maxTensors)
		}
		e, err := p.parseEntry(key)
		if err != nil {
			return nil, err
		}
		hdr.entries = append(hdr.entries, e)
	}
	if err := p.end("header"); err != nil {
		return nil, err
	}
	return hdr, nil
}

// end reads the closing brace of the top-level object and requires nothing
// but whitespace after it.
func (p *headerParser) end(what string) error {
	if _, err := p.expectDelim("", '}', what); err != nil {
		return err
	}
	pos := p.dec.InputOffset()
	if tok, err := p.dec.Token(); !errors.Is(err, io.EOF) {
		for pos < int64(len(p.h)) && (p.h[pos] == ' ' || p.h[pos] == '\t' || p.h[pos] == '\n' || p.h[pos] == '\r') {
			pos++
		}
		if err != nil {
			return p.fail("", p.base+pos, p.bad, "unexpected data after the %s object: %v", what, err)
		}
		return p.fail("", p.base+pos, p.bad, "unexpected %s after the %s object", describe(tok), what)
	}
	return nil
}

// parseMetadata reads the "__metadata__" object: a string → string map.
func (p *headerParser) parseMetadata() (map[string]string, error) {
	if _, err := p.expectDelim("", '{', `"__metadata__"`); err != nil {
		return nil, err
	}
	md := make(map[string]string)
	for p.dec.More() {
		tok, at, err := p.next("")
		if err != nil {
			return nil, err
		}
		key, _ := tok.(string)
		if _, dup := md[key]; dup {
			return nil, p.fail("", at, ErrHeader, "duplicate %q key %q", metadataKey, key)
		}
		tok, at, err = p.next("")
		if err != nil {
			return nil, err
		}
		val, ok := tok.(string)
		if !ok {
			return nil, p.fail("", at, ErrHeader, "%q value for key %q must be a string, found %s", metadataKey, key, describe(tok))
		}
		md[key] = val
	}
	if _, err := p.expectDelim("", '}', `"__metadata__"`); err != nil {
		return nil, err
	}
	return md, nil
}

// parseEntry reads one tensor entry: exactly "dtype", "shape" and
// "data_offsets".
func (p *headerParser) parseEntry(name string) (headerEntry, error) {
	e := headerEntry{name: name}
	at, err := p.expectDelim(name, '{', "tensor entry")
	if err != nil {
		return e, err
	}
	e.at = at
	var haveDType, haveShape, haveOffsets bool
	var shapeAt int64
	for p.dec.More() {
		tok, at, err := p.next(name)
		if err != nil {
			return e, err
		}
		key, _ := tok.(string)
		var dup bool
		switch key {
		case "dtype":
			dup, haveDType = haveDType, true
		case "shape":
			dup, haveShape = haveShape, true
		case "data_offsets":
			dup, haveOffsets = haveOffsets, true
		default:
			return e, p.fail(name, at, ErrHeader, "unexpected field %q (want only \"dtype\", \"shape\", \"data_offsets\")", key)
		}
		if dup {
			return e, p.fail(name, at, ErrHeader, "duplicate field %q", key)
		}
		switch key {
		case "dtype":
			tok, at, err := p.next(name)
			if err != nil {
				return e, err
			}
			s, ok := tok.(string)
			if !ok {
				return e, p.fail(name, at, ErrHeader, "dtype must be a string, found %s", describe(tok))
			}
			if _, known := dtypeSizes[s]; !known && !isDTypeName(s) {
				return e, p.fail(name, at, ErrDType, "dtype %q is not a dtype name (want 1 to %d upper-case letters, digits or '_', starting with a letter)", s, maxDTypeName)
			}
			e.dtype = s
		case "shape":
			if shapeAt, err = p.expectDelim(name, '[', "shape"); err != nil {
				return e, err
			}
			e.shape = []int64{}
			for p.dec.More() {
				d, err := p.nonNegative(name, "shape dimension")
				if err != nil {
					return e, err
				}
				e.shape = append(e.shape, d)
			}
			if _, err := p.expectDelim(name, ']', "shape"); err != nil {
				return e, err
			}
		case "data_offsets":
			offAt, err := p.expectDelim(name, '[', "data_offsets")
			if err != nil {
				return e, err
			}
			var offs []int64
			for p.dec.More() && len(offs) < 2 {
				v, err := p.nonNegative(name, "data offset")
				if err != nil {
					return e, err
				}
				offs = append(offs, v)
			}
			if len(offs) != 2 || p.dec.More() {
				return e, p.fail(name, offAt, ErrHeader, "data_offsets must hold exactly 2 integers")
			}
			if _, err := p.expectDelim(name, ']', "data_offsets"); err != nil {
				return e, err
			}
			e.begin, e.end = offs[0], offs[1]
		}
	}
	if _, err := p.expectDelim(name, '}', "tensor entry"); err != nil {
		return e, err
	}
	for _, f := range []struct {
		have bool
		name string
	}{{haveDType, "dtype"}, {haveShape, "shape"}, {haveOffsets, "data_offsets"}} {
		if !f.have {
			return e, p.fail(name, e.at, ErrHeader, "missing field %q", f.name)
		}
	}
	size, known := dtypeSizes[e.dtype]
	if !known {
		// An unknown dtype has no element size: only the element count must
		// fit, and the byte length comes from the offsets (layoutTensors).
		size = 1
	}
	n, ok := shapeBytes(e.shape, int64(size))
	if !ok {
		return e, p.fail(name, shapeAt, ErrHeader, "shape %v × %s overflows 64-bit size", e.shape, e.dtype)
	}
	e.nbytes = n
	if !known {
		e.nbytes = -1
		e.count = n
	}
	return e, nil
}

// maxDTypeName bounds the length of a dtype string this package does not
// know.
const maxDTypeName = 32

// isDTypeName reports whether s looks like a dtype string: an upper-case
// letter, then upper-case letters, digits or '_', at most maxDTypeName bytes.
// Such a dtype is accepted without being known; see layoutTensors.
func isDTypeName(s string) bool {
	if len(s) == 0 || len(s) > maxDTypeName || s[0] < 'A' || s[0] > 'Z' {
		return false
	}
	for i := 1; i < len(s); i++ {
		c := s[i]
		if !('A' <= c && c <= 'Z' || '0' <= c && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}

// nonNegative reads a JSON integer in [0, MaxInt64].
func (p *headerParser) nonNegative(tensor, what string) (int64, error) {
	tok, at, err := p.next(tensor)
	if err != nil {
		return 0, err
	}
	num, ok := tok.(json.Number)
	if !ok {
		return 0, p.fail(tensor, at, p.bad, "%s must be a non-negative integer, found %s", what, describe(tok))
	}
	s := num.String()
	if len(s) > 0 && s[0] == '-' {
		return 0, p.fail(tensor, at, p.bad, "%s %s is negative", what, s)
	}
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return 0, p.fail(tensor, at, p.bad, "%s %s is not an integer", what, s)
		}
	}
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil {
		return 0, p.fail(tensor, at, p.bad, "%s %s is out of range", what, s)
	}
	return v, nil
}

// shapeBytes returns product(shape) × size, or false if it exceeds MaxInt64.
func shapeBytes(shape []int64, size int64) (int64, bool) {
	n := uint64(size)
	for _, d := range shape {
		hi, lo := bits.Mul64(n, uint64(d))
		if hi != 0 || lo > math.MaxInt64 {
			return 0, false
		}
		n = lo
	}
	return int64(n), true
}

// absolute returns dataStart+rel, saturating at MaxInt64.
func absolute(dataStart, rel int64) int64 {
	if rel > math.MaxInt64-dataStart {
		return math.MaxInt64
	}
	return dataStart + rel
}

// layoutTensors checks the data offsets of entries against a data section of
// dataLen bytes starting at dataStart in file, and returns the tensors in
// data-offset order: sorted, contiguous from 0, no holes, overlaps or
// reversal, each span equal to shape × dtype size, the last ending exactly at
// the end of the file.
//
// A dtype this package does not know has no element size, so its span is
// taken from the offsets, which must still be contiguous with their
// neighbours; the only size rule is that the span is empty exactly when the
// shape holds no element. Such a tensor can be kept byte for byte but not
// decoded (Tensor.DecodeWeights gives ErrDType).
func layoutTensors(file string, entries []headerEntry, dataStart, dataLen int64) ([]*Tensor, error) {
	for _, e := range entries {
		if e.end < e.begin {
			return nil, inputError(file, e.name, absolute(dataStart, e.begin), ErrOffsets,
				"data_offsets [%d, %d] are reversed", e.begin, e.end)
		}
	}
	slices.SortFunc(entries, func(a, b headerEntry) int {
		return cmp.Or(cmp.Compare(a.begin, b.begin), cmp.Compare(a.end, b.end), cmp.Compare(a.name, b.name))
	})
	tensors := make([]*Tensor, 0, len(entries))
	var pos int64
	prev := ""
	for _, e := range entries {
		at := absolute(dataStart, e.begin)
		switch {
		case e.begin > pos:
			return nil, inputError(file, e.name, at, ErrOffsets,
				"data_offsets [%d, %d] leave a hole of %d bytes after byte %d of the data section", e.begin, e.end, e.begin-pos, pos)
		case e.begin < pos:
			return nil, inputError(file, e.name, at, ErrOffsets,
				"data_offsets [%d, %d] overlap tensor %q, which ends at %d", e.begin, e.end, prev, pos)
		case e.nbytes >= 0 && e.end-e.begin != e.nbytes:
			return nil, inputError(file, e.name, at, ErrOffsets,
				"data_offsets [%d, %d] span %d bytes, shape %v × %s needs %d", e.begin, e.end, e.end-e.begin, e.shape, e.dtype, e.nbytes)
		case e.nbytes < 0 && (e.end == e.begin) != (e.count == 0):
			return nil, inputError(file, e.name, at, ErrOffsets,
				"data_offsets [%d, %d] span %d bytes for the %d elements of shape %v (dtype %q is unknown, but only an empty shape takes no bytes)",
				e.begin, e.end, e.end-e.begin, e.count, e.shape, e.dtype)
		case e.end > dataLen:
			return nil, inputError(file, e.name, at, ErrTruncated,
				"data_offsets [%d, %d] run past the end of the %d-byte data section", e.begin, e.end, dataLen)
		}
		pos, prev = e.end, e.name
		tensors = append(tensors, &Tensor{
			Name:    e.name,
			DType:   e.dtype,
			Shape:   e.shape,
			File:    file,
			Offset:  at,
			Length:  e.end - e.begin,
			entryAt: e.at,
		})
	}
	if pos < dataLen {
		return nil, inputError(file, "", absolute(dataStart, pos), ErrOffsets,
			"%d trailing bytes after the last tensor", dataLen-pos)
	}
	return tensors, nil
}
