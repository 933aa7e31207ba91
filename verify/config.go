package verify

import (
	"errors"
	"fmt"

	"ternkit/manifest"
	"ternkit/modelconfig"
	"ternkit/pack"
)

// ConfigCompanion is the companion whose model config is cross-checked
// against the tensors.
const ConfigCompanion = "config.json"

// checkConfig cross-checks the artifact's config.json companion, when it
// is a model config, against the tensors' shapes: each mismatch is a
// warning naming key, tensor and both values. Tensors of a layout the check
// does not know are not checked, and a note says so once.
func checkConfig(rep *Report, a *pack.Artifact) {
	c := a.Manifest().Companion(ConfigCompanion)
	if c == nil {
		return
	}
	if n := c.Section.Length; n > modelconfig.MaxSize {
		// known from the manifest: not read into memory to be refused
		rep.Warnings = append(rep.Warnings, fmt.Sprintf("%s: config is %d bytes, above the %d-byte limit: not checked against the tensors",
			ConfigCompanion, n, modelconfig.MaxSize))
		return
	}
	data, err := a.Companion(ConfigCompanion)
	if err != nil {
		return // the section's hash check has failed already
	}
	for _, w := range ConfigWarnings(ConfigCompanion, data, ShapesOf(a.Tensors())) {
		if w.Note {
			rep.Notes = append(rep.Notes, w.Text)
		} else {
			rep.Warnings = append(rep.Warnings, w.Text)
		}
	}
}

// ShapesOf lists the tensors' names and shapes for the config check.
func ShapesOf(es []manifest.Tensor) []modelconfig.Tensor {
	out := make([]modelconfig.Tensor, len(es))
	for i, e := range es {
		out[i] = modelconfig.Tensor{Name: e.Name, Shape: e.Shape}
	}
	return out
}

// ConfigWarning is what the config check says: a warning (a mismatch, or
// a config that cannot be read), or a note (nothing checked, and why).
type ConfigWarning struct {
	Text string
	Note bool
}

// ConfigWarnings cross-checks the config file named name, holding data,
// against the tensors (pack uses it on the source, verify on the
// artifact).
func ConfigWarnings(name string, data []byte, tensors []modelconfig.Tensor) []ConfigWarning {
	c, err := modelconfig.Parse(name, data)
	switch {
	case errors.Is(err, modelconfig.ErrNotModelConfig):
		return []ConfigWarning{{Text: fmt.Sprintf("%s sets no architecture key: not checked against the tensors", name), Note: true}}
	case err != nil:
		return []ConfigWarning{{Text: fmt.Sprintf("%v: not checked against the tensors", err)}}
	case !modelconfig.KnownLayout(tensors):
		return []ConfigWarning{{Text: fmt.Sprintf("%s not checked: the tensor names are not of the common decoder layout (%s, model.layers.N.…)", name, modelconfig.EmbedName), Note: true}}
	}
	var out []ConfigWarning
	for _, m := range c.Check(tensors) {
		out = append(out, ConfigWarning{Text: name + ": " + m.String()})
	}
	return out
}
