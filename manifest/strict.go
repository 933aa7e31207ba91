package manifest

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"reflect"
	"strings"
	"unicode/utf8"
)

// checkStrictJSON enforces what encoding/json lets pass but pack/FORMAT.md
// forbids: text that is not UTF-8, an object key that matches a field only
// when case is ignored, and a key repeated within one object. It walks b
// beside the Go type t; syntax and type errors are left to the decoder.
func checkStrictJSON(b []byte, t reflect.Type) error {
	if !utf8.Valid(b) {
		return fmt.Errorf("%w: not valid UTF-8", ErrInvalid)
	}
	if err := checkSurrogates(b); err != nil {
		return err
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.UseNumber()
	err := walkJSON(dec, t, "manifest", 0)
	if _, syntax := err.(*json.SyntaxError); syntax {
		return nil // the decoder reports it, as ErrInvalid
	}
	if err != nil && !errors.Is(err, ErrInvalid) {
		// the JSON ends early (an empty manifest, say): invalid, not an
		// I/O failure
		return fmt.Errorf("%w: %v", ErrInvalid, err)
	}
	return err
}

// MaxDepth is the deepest nesting of arrays and objects a manifest may
// have (pack/FORMAT.md, "Manifest"); a manifest nests 4 levels deep. The
// limit keeps the walk, which builds a path per level, linear in time and
// memory however deep a hostile manifest nests.
const MaxDepth = 64

func walkJSON(dec *json.Decoder, t reflect.Type, path string, depth int) error {
	tok, err := dec.Token()
	if err != nil {
		return err
	}
	if depth >= MaxDepth && (tok == json.Delim('{') || tok == json.Delim('[')) {
		return fmt.Errorf("%w: %s: nested more than %d levels deep", ErrInvalid, path, MaxDepth)
	}
	for t != nil && t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch tok {
	case nil:
		return fmt.Errorf("%w: %s is null (no key of the format takes null: leave an optional key out)", ErrInvalid, path)
	case json.Delim('{'):
		var fields map[string]reflect.Type
		if t != nil && t.Kind() == reflect.Struct {
			fields = keysOf(t).fields
		}
		seen := map[string]bool{}
		for dec.More() {
			kt, err := dec.Token()
			if err != nil {
				return err
			}
			key, _ := kt.(string)
			if seen[key] {
				return fmt.Errorf("%w: %s: key %q appears twice", ErrInvalid, path, key)
			}
			seen[key] = true
			var vt reflect.Type
			switch {
			case fields != nil:
				ft, ok := fields[key]
				if !ok {
					return fmt.Errorf("%w: %s: unknown key %q", ErrInvalid, path, key)
				}
				vt = ft
			case t != nil && t.Kind() == reflect.Map:
				vt = t.Elem()
			}
			if err := walkJSON(dec, vt, path+"."+key, depth+1); err != nil {
				return err
			}
		}
		if _, err := dec.Token(); err != nil { // }
			return err
		}
		if t != nil && t.Kind() == reflect.Struct {
			for _, key := range keysOf(t).required {
				if !seen[key] {
					return fmt.Errorf("%w: %s: required key %q is missing", ErrInvalid, path, key)
				}
			}
		}
		return nil
	case json.Delim('['):
		var et reflect.Type
		if t != nil && (t.Kind() == reflect.Slice || t.Kind() == reflect.Array) {
			et = t.Elem()
		}
		for i := 0; dec.More(); i++ {
			if err := walkJSON(dec, et, fmt.Sprintf("%s[%d]", path, i), depth+1); err != nil {
				return err
			}
		}
		_, err = dec.Token() // ]
		return err
	}
	return nil
}

// requiredKeys are the JSON names of t's fields without omitempty: the
// keys pack/FORMAT.md marks required.
func requiredKeys(t reflect.Type) []string {
	var keys []string
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		name, opts, _ := strings.Cut(f.Tag.Get("json"), ",")
		if !f.IsExported() || name == "-" || strings.Contains(opts, "omitempty") {
			continue
		}
		if name == "" {
			name = f.Name
		}
		keys = append(keys, name)
	}
	return keys
}

// jsonFields maps the JSON names of t's fields to their types.
func jsonFields(t reflect.Type) map[string]reflect.Type {
	fields := make(map[string]reflect.Type, t.NumField())
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		switch name {
		case "-":
			continue
		case "":
			name = f.Name
		}
		fields[name] = f.Type
	}
	return fields
}

// checkSurrogates rejects a \u escape of a UTF-16 surrogate (U+D800 to
// U+DFFF) that is not a high surrogate directly followed by the escape of
// a low one: such a string has no Unicode text, and JSON decoders differ on
// it (some replace it with U+FFFD, some keep it).
func checkSurrogates(b []byte) error {
	in := false
	for i := 0; i < len(b); i++ {
		c := b[i]
		if !in {
			in = c == '"'
			continue
		}
		switch c {
		case '"':
			in = false
		case '\\':
			if i+1 < len(b) && b[i+1] != 'u' {
				i++
				continue
			}
			r, ok := hex4(b, i+2)
			if !ok || r < 0xd800 || r > 0xdfff {
				i++
				continue
			}
			if r <= 0xdbff && i+7 < len(b) && b[i+6] == '\\' && b[i+7] == 'u' {
				if lo, ok := hex4(b, i+8); ok && lo >= 0xdc00 && lo <= 0xdfff {
					i += 11
					continue
				}
			}
			return fmt.Errorf("%w: lone surrogate escape \\u%04x at byte %d", ErrInvalid, r, i)
		}
	}
	return nil
}

// hex4 reads the 4 hex digits at b[i:].
func hex4(b []byte, i int) (rune, bool) {
	if i+4 > len(b) {
		return 0, false
	}
	var r rune
	for _, c := range b[i : i+4] {
		switch {
		case '0' <= c && c <= '9':
			r = r<<4 | rune(c-'0')
		case 'a' <= c && c <= 'f':
			r = r<<4 | rune(c-'a'+10)
		case 'A' <= c && c <= 'F':
			r = r<<4 | rune(c-'A'+10)
		default:
			return 0, false
		}
	}
	return r, true
}
