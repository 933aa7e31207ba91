package report

import (
	"ternkit/modelconfig"
	"ternkit/pack"
)

// Companion is a companion file the artifact carries (format 1.3).
type Companion struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	BLAKE3 string `json:"blake3"`
}

// configCompanion is the companion read as the model's config.
const configCompanion = "config.json"

// addCompanions lists the artifact's companions and, when config.json is
// a model config of the common layout, its architecture.
func addCompanions(s *Summary, a *pack.Artifact) {
	for _, c := range a.Companions() {
		s.Companions = append(s.Companions, Companion{Name: c.Name, Bytes: c.Section.Length, BLAKE3: c.Section.BLAKE3})
	}
	if c := a.Manifest().Companion(configCompanion); c == nil || c.Section.Length > modelconfig.MaxSize {
		return // none, or too large to be a config (not read to learn that)
	}
	data, err := a.Companion(configCompanion)
	if err != nil {
		return // a bad hash is verify's to report; the summary shows no architecture
	}
	if c, err := modelconfig.Parse(configCompanion, data); err == nil {
		s.Architecture = c
		s.ArchitectureSummary = c.Summary()
	}
}
