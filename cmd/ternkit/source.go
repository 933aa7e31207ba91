package main

import (
	"fmt"
	"io"

	"ternkit/convert"
)

// openSource opens the checkpoint at path (a .safetensors file, a sharded
// set's index, or a directory holding either) and prints what it warns
// about on stderr.
func openSource(path string, stderr io.Writer) (*convert.Source, error) {
	s, err := convert.Open(path)
	if err != nil {
		return nil, err
	}
	for _, w := range s.Warnings {
		fmt.Fprintf(stderr, "ternkit: warning: %s\n", w)
	}
	return s, nil
}
