package main

import (
	"ternkit/convert"
	"ternkit/internal/inputfile"
	"ternkit/modelconfig"
	"ternkit/pack"
	"ternkit/verify"
)

// warnConfig cross-checks the config.json among the companions against the
// source's tensors and adds each mismatch to warn (and a note when nothing
// could be checked).
func warnConfig(warn *warnings, companions []pack.Companion, tensors []*convert.Tensor) {
	for _, c := range companions {
		if c.Name != verify.ConfigCompanion {
			continue
		}
		data, err := inputfile.ReadFile(c.Path)
		if err != nil {
			warn.add("%s: %v", c.Path, err)
			return
		}
		shapes := make([]modelconfig.Tensor, len(tensors))
		for i, t := range tensors {
			shapes[i] = modelconfig.Tensor{Name: t.Name, Shape: t.Shape}
		}
		for _, w := range verify.ConfigWarnings(c.Name, data, shapes) {
			if w.Note {
				warn.note("%s", w.Text)
			} else {
				warn.add("%s", w.Text)
			}
		}
		return
	}
}
