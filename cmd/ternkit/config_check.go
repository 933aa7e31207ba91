package main

import (
	"fmt"
	"io"
	"os"

	"ternkit/convert"
	"ternkit/modelconfig"
	"ternkit/pack"
	"ternkit/verify"
)

// warnConfig cross-checks the config.json among the companions against the
// source's tensors and prints each mismatch as a warning on stderr (and a
// note when nothing could be checked).
func warnConfig(stderr io.Writer, companions []pack.Companion, tensors []*convert.Tensor) {
	for _, c := range companions {
		if c.Name != verify.ConfigCompanion {
			continue
		}
		data, err := os.ReadFile(c.Path)
		if err != nil {
			fmt.Fprintf(stderr, "warning: %s: %v\n", c.Path, err)
			return
		}
		shapes := make([]modelconfig.Tensor, len(tensors))
		for i, t := range tensors {
			shapes[i] = modelconfig.Tensor{Name: t.Name, Shape: t.Shape}
		}
		for _, w := range verify.ConfigWarnings(c.Name, data, shapes) {
			if w.Note {
				fmt.Fprintf(stderr, "note: %s\n", w.Text)
			} else {
				fmt.Fprintf(stderr, "warning: %s\n", w.Text)
			}
		}
		return
	}
}
