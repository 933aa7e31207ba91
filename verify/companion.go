package verify

import "ternkit/manifest"

// CompanionPrefix starts the Tensor field of the checks of a companion
// file's section: "companion:" and its name.
const CompanionPrefix = "companion:"

// companionSections are the companion files' sections, after the tensors'
// in file order. Their checks name "companion:NAME"; only their hashes and
// the padding after them are checked (their bytes are the files').
func companionSections(m *manifest.Manifest) []placedSection {
	var out []placedSection
	for _, c := range m.Companions {
		out = append(out, placedSection{s: c.Section, owner: &manifest.Tensor{Name: CompanionPrefix + c.Name}})
	}
	return out
}
