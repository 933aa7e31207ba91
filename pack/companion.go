package pack

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"

	"ternkit/internal/inputfile"
	"ternkit/manifest"
)

// Companion is a file Build carries into the artifact beside the weights:
// the name it is stored under (a base name, see
// manifest.CheckCompanionName) and the path it is read from.
type Companion struct {
	Name string
	Path string
}

// MaxCompanionSize is the largest companion file Build takes (256 MiB):
// configs, tokenizers and model cards are far smaller.
const MaxCompanionSize = 256 << 20

// ErrCompanion reports a companion file Build refuses: not a regular file,
// a symbolic link leading out of its directory, over MaxCompanionSize, or
// a name the format does not allow.
var ErrCompanion = errors.New("unusable companion file")

// ErrNoCompanion reports a companion name the artifact does not carry.
var ErrNoCompanion = errors.New("no such companion")

// DefaultCompanionGlobs are the file names a checkpoint directory usually
// holds beside its weights and that pack carries by default (matched with
// path.Match against base names, case-sensitively): model and generation
// config, tokenizer files and vocabularies, special-token maps, chat
// templates, licence and model card. ternkit's own outputs (artifacts,
// HTML reports, policy files) match none of them.
var DefaultCompanionGlobs = []string{
	"config.json", "generation_config.json",
	"tokenizer.json", "tokenizer_config.json", "tokenizer.model",
	"vocab.json", "vocab.txt", "merges.txt",
	"special_tokens_map.json", "added_tokens.json",
	"chat_template.*",
	"LICENSE", "LICENSE.*", "LICENCE", "LICENCE.*", "NOTICE",
	"README.md", "MODEL_CARD.md",
}

// FindCompanions lists the regular files of dir whose base names match
// globs (patterns of path.Match), sorted by name. A pattern that is not
// valid is an error; files that match but cannot be carried are returned
// too, for CheckCompanion to refuse.
func FindCompanions(dir string, globs []string) ([]Companion, error) {
	for _, g := range globs {
		if _, err := filepath.Match(g, ""); err != nil {
			return nil, fmt.Errorf("companion pattern %q: %w", g, err)
		}
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, err
	}
	var out []Companion
	for _, de := range entries {
		name := de.Name()
		if slices.ContainsFunc(globs, func(g string) bool { ok, _ := filepath.Match(g, name); return ok }) {
			out = append(out, Companion{Name: name, Path: filepath.Join(dir, name)})
		}
	}
	return out, nil
}

// CheckCompanion refuses a companion that Build would not carry: a name
// the format does not allow, a path that is not a regular file (a
// symbolic link is followed only when its target is in the same
// directory), or a file over MaxCompanionSize. Errors wrap ErrCompanion.
func CheckCompanion(c Companion) error {
	fail := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s: %s", ErrCompanion, c.Path, fmt.Sprintf(format, args...))
	}
	if err := manifest.CheckCompanionName(c.Name); err != nil {
		return fail("%v", err)
	}
	lst, err := os.Lstat(c.Path)
	if err != nil {
		return fail("%v", err)
	}
	if lst.Mode()&os.ModeSymlink != 0 {
		target, err := filepath.EvalSymlinks(c.Path)
		if err != nil {
			return fail("%v", err)
		}
		dir, err := filepath.EvalSymlinks(filepath.Dir(c.Path))
		if err != nil {
			return fail("%v", err)
		}
		if filepath.Dir(target) != dir {
			return fail("symbolic link to %s, outside its directory", target)
		}
	}
	st, err := os.Stat(c.Path)
	if err != nil {
		return fail("%v", err)
	}
	if !st.Mode().IsRegular() {
		return fail("not a regular file (%s)", st.Mode().Type())
	}
	if st.Size() > MaxCompanionSize {
		return fail("%d bytes, over the %d-byte limit for a companion", st.Size(), MaxCompanionSize)
	}
	return nil
}

// checkCompanions checks every companion and that no two names would be
// one file.
func checkCompanions(cs []Companion) error {
	seen := map[string]string{}
	for _, c := range cs {
		if err := CheckCompanion(c); err != nil {
			return err
		}
		k := strings.ToLower(c.Name)
		if prev, ok := seen[k]; ok {
			return fmt.Errorf("%w: companions %q and %q would be one file", ErrCompanion, prev, c.Name)
		}
		seen[k] = c.Name
	}
	return nil
}

// writeCompanion copies the file into the artifact as a section and
// returns its manifest entry.
func (w *atomicWriter) writeCompanion(c Companion) (manifest.Companion, error) {
	f, err := inputfile.Open(c.Path)
	if err != nil {
		return manifest.Companion{}, fmt.Errorf("%w: %v", ErrCompanion, err)
	}
	defer f.Close()
	if st, err := f.Stat(); err != nil {
		return manifest.Companion{}, fmt.Errorf("%w: %s: %v", ErrCompanion, c.Path, err)
	} else if !st.Mode().IsRegular() {
		return manifest.Companion{}, fmt.Errorf("%w: %s: not a regular file (%s)", ErrCompanion, c.Path, st.Mode().Type())
	}
	if err := w.pad(); err != nil {
		return manifest.Companion{}, err
	}
	off := w.off
	h := newSectionHasher(runtime.GOMAXPROCS(0))
	buf := make([]byte, 1<<20)
	var n int64
	for {
		k, err := f.Read(buf)
		if k > 0 {
			n += int64(k)
			if n > MaxCompanionSize {
				return manifest.Companion{}, fmt.Errorf("%w: %s: grew past the %d-byte limit while read", ErrCompanion, c.Path, MaxCompanionSize)
			}
			if err := w.write(buf[:k]); err != nil {
				return manifest.Companion{}, err
			}
			h.Write(buf[:k])
		}
		if err == io.EOF {
			break
		}
		if err != nil {
			return manifest.Companion{}, fmt.Errorf("%w: %s: %v", ErrCompanion, c.Path, err)
		}
	}
	s := h.section()
	s.Offset = off
	return manifest.Companion{Name: c.Name, Section: s}, nil
}

// Companions lists the artifact's companion entries in file order.
func (a *Artifact) Companions() []manifest.Companion { return a.m.Companions }

// Companion returns the bytes of the named companion after checking them
// against the BLAKE3 and piece hashes the manifest records. Errors:
// ErrNoCompanion for a name the artifact does not carry, a *FormatError
// wrapping ErrHash for bytes that differ, ErrCompanion for a companion
// over MaxCompanionSize. Memory holds the whole file: Build writes none
// over MaxCompanionSize, and Companion refuses a larger one before
// allocating (the format bounds a companion only by the file, which may be
// sparse).
func (a *Artifact) Companion(name string) ([]byte, error) {
	c := a.m.Companion(name)
	if c == nil {
		return nil, fmt.Errorf("%w %q", ErrNoCompanion, name)
	}
	if c.Section.Length > MaxCompanionSize {
		return nil, fmt.Errorf("%w: %s: companion %q is %d bytes, over the %d-byte limit for reading one into memory",
			ErrCompanion, a.file, name, c.Section.Length, MaxCompanionSize)
	}
	return a.verifiedCompanion(c)
}

func (a *Artifact) verifiedCompanion(c *manifest.Companion) ([]byte, error) {
	s := c.Section
	fail := func(off int64, err error) error {
		return &FormatError{File: a.file, Where: fmt.Sprintf("companion %q", c.Name), Offset: off, Err: err}
	}
	p := make([]byte, s.Length)
	if _, err := a.r.ReadAt(p, s.Offset); err != nil {
		return nil, fail(s.Offset, err)
	}
	if err := checkSectionBytes(p, s, "companion", runtime.GOMAXPROCS(0), fail); err != nil {
		return nil, err
	}
	return p, nil
}
