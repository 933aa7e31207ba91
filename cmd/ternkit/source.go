package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"unicode/utf8"

	"ternkit/convert"
	"ternkit/internal/inputfile"
)

// openSource opens the checkpoint at path (a .safetensors file, a sharded
// set's index, or a directory holding either) and adds what it warns about
// to w. A file that is plainly something else (a model config, a text
// file) gets an error saying what was expected.
func openSource(path string, w *warnings) (*convert.Source, error) {
	s, err := convert.Open(path)
	if err != nil {
		return nil, explainSource(err, path)
	}
	w.addAll(s.Warnings)
	return s, nil
}

// sourceExpected says what a checkpoint argument may be.
const sourceExpected = "want a .safetensors file, a sharded set's index (*.safetensors.index.json, with a \"weight_map\"), or a directory holding either"

// explainSource adds a hint to an error about a checkpoint argument that
// is a JSON file without a weight_map (a model config, say) or a text file.
func explainSource(err error, path string) error {
	f, oerr := inputfile.Open(path) // never blocks on a named pipe
	if oerr != nil {
		return err
	}
	defer f.Close()
	if st, serr := f.Stat(); serr != nil || !st.Mode().IsRegular() {
		return err
	}
	head := make([]byte, 4096)
	n, _ := io.ReadFull(f, head)
	head = head[:n]
	for i := 0; i < 3 && n == cap(head) && len(head) > 0 && !utf8.Valid(head); i++ {
		head = head[:len(head)-1] // a character cut at the end of the read
	}
	trimmed := bytes.TrimLeft(head, " \t\r\n\ufeff")
	switch {
	case len(trimmed) > 0 && trimmed[0] == '{':
		var obj map[string]json.RawMessage
		data, rerr := inputfile.ReadFile(path)
		if rerr == nil && json.Unmarshal(data, &obj) == nil {
			if _, ok := obj["weight_map"]; !ok {
				what := "a JSON file"
				if _, ok := obj["hidden_size"]; ok {
					what = "a model config (JSON with \"hidden_size\")"
				}
				return hintError{err, fmt.Sprintf("%s is %s, not a checkpoint: %s", path, what, sourceExpected)}
			}
		}
	case n > 0 && utf8.Valid(head) && isText(head):
		return hintError{err, fmt.Sprintf("%s looks like a text file, not a safetensors checkpoint (which starts with an 8-byte little-endian header length): %s", path, sourceExpected)}
	}
	return err
}

// isText reports whether b holds printable text and whitespace only.
func isText(b []byte) bool {
	for _, r := range string(b) {
		if r == utf8.RuneError || (r < 0x20 && r != '\n' && r != '\r' && r != '\t') || r == 0x7f {
			return false
		}
	}
	return true
}
