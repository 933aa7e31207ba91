package verify

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/inputfile"
	"ternkit/manifest"
	"ternkit/pack"
)

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

// CheckCompanionFile compares a companion file with the source
// directory's file of the same name (verify --against).
const CheckCompanionFile = "companion_file"

// checkCompanionsAgainst compares each companion with the file of its name
// in the source checkpoint's directory: a missing or changed file fails,
// naming it. When the artifact carries companions, a file of the directory
// that the default companion list selects and the artifact lacks fails too
// ("extra"); an artifact without companions makes no claim about them.
func checkCompanionsAgainst(rep *Report, a *pack.Artifact, src *convert.Source) {
	comps := a.Companions()
	if len(comps) == 0 {
		return
	}
	dir := filepath.Dir(src.Path)
	for _, c := range comps {
		name := CompanionPrefix + c.Name
		path := filepath.Join(dir, c.Name)
		st, err := os.Stat(path)
		switch {
		case errors.Is(err, fs.ErrNotExist):
			rep.add(CheckCompanionFile, name, false, "missing: the artifact carries %s, the source directory has no such file", c.Name)
			continue
		case err != nil:
			rep.add(CheckCompanionFile, name, false, "%v", err)
			continue
		case !st.Mode().IsRegular():
			rep.add(CheckCompanionFile, name, false, "changed: %s is not a regular file in the source directory", path)
			continue
		case st.Size() != c.Section.Length:
			rep.add(CheckCompanionFile, name, false, "changed: %s is %d bytes, the artifact's copy %d", path, st.Size(), c.Section.Length)
			continue
		}
		sum, err := fileBLAKE3(path)
		switch {
		case err != nil:
			rep.add(CheckCompanionFile, name, false, "%v", err)
		case sum != c.Section.BLAKE3:
			rep.add(CheckCompanionFile, name, false, "changed: %s has BLAKE3 %s, the artifact's copy %s", path, sum, c.Section.BLAKE3)
		default:
			rep.add(CheckCompanionFile, name, true, "")
		}
	}
	found, err := pack.FindCompanions(dir, pack.DefaultCompanionGlobs)
	if err != nil {
		rep.add(CheckCompanionFile, "", false, "list the source directory: %v", err)
		return
	}
	weights := map[string]bool{filepath.Base(src.Path): true}
	for _, f := range src.Files {
		weights[filepath.Base(f.Path)] = true
	}
	for _, f := range found {
		if a.Manifest().Companion(f.Name) == nil && !weights[f.Name] {
			rep.add(CheckCompanionFile, CompanionPrefix+f.Name, false, "extra: the source directory has %s, a companion the artifact does not carry", f.Name)
		}
	}
}

// fileBLAKE3 is the hex BLAKE3 of the file at path, read in a stream.
func fileBLAKE3(path string) (string, error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := blake3.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("read %s: %w", path, err)
	}
	return manifest.HexHash([32]byte(h.Sum(nil))), nil
}
