package manifest

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// Companion is a file that travels with the weights (model config,
// tokenizer, licence, model card): its base name and the section holding
// its bytes, unchanged.
type Companion struct {
	Name    string  `json:"name"`
	Section Section `json:"section"`
}

// MaxCompanionName is the longest companion name in bytes.
const MaxCompanionName = 255

// CheckCompanionName enforces the name rules of pack/FORMAT.md
// ("Companions"): a base name that any file system takes as one file in
// the directory it is written to.
func CheckCompanionName(name string) error {
	switch {
	case name == "":
		return fmt.Errorf("companion name is empty")
	case len(name) > MaxCompanionName:
		return fmt.Errorf("companion name %q is %d bytes (at most %d)", name, len(name), MaxCompanionName)
	case !utf8.ValidString(name):
		return fmt.Errorf("companion name %q is not UTF-8", name)
	case name == "." || name == "..":
		return fmt.Errorf("companion name %q is not a file name", name)
	case strings.ContainsAny(name, `/\`):
		return fmt.Errorf("companion name %q holds a path separator", name)
	}
	for _, r := range name {
		if r < 0x20 || r == 0x7f {
			return fmt.Errorf("companion name %q holds control character U+%04X", name, r)
		}
	}
	return nil
}

// foldName is a companion name with ASCII letters lowercased: two names
// that fold alike would be one file on a case-insensitive file system.
func foldName(name string) string {
	b := []byte(name)
	for i, c := range b {
		if 'A' <= c && c <= 'Z' {
			b[i] = c + 'a' - 'A'
		}
	}
	return string(b)
}

func (m *Manifest) validateCompanions() error {
	if m.Companions != nil && len(m.Companions) == 0 {
		return fmt.Errorf("companions is an empty list (leave it out)")
	}
	seen := make(map[string]string, len(m.Companions))
	for i, c := range m.Companions {
		if err := CheckCompanionName(c.Name); err != nil {
			return fmt.Errorf("companion %d: %v", i, err)
		}
		if prev, ok := seen[foldName(c.Name)]; ok {
			return fmt.Errorf("companion names %q and %q differ only in ASCII case or not at all", prev, c.Name)
		}
		seen[foldName(c.Name)] = c.Name
		if err := checkSection(c.Section); err != nil {
			return fmt.Errorf("companion %q: section: %v", c.Name, err)
		}
	}
	return nil
}

// Companion returns the companion of that name, or nil.
func (m *Manifest) Companion(name string) *Companion {
	for i := range m.Companions {
		if m.Companions[i].Name == name {
			return &m.Companions[i]
		}
	}
	return nil
}
