package main

import (
	"fmt"
	"io"
	"path/filepath"
	"slices"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/pack"
)

// companionFlags choose the files pack carries beside the weights.
type companionFlags struct {
	extra []string // --companion GLOB
	none  bool     // --no-companions
}

func (f *companionFlags) register(cmd *cobra.Command) {
	cmd.Flags().StringArrayVar(&f.extra, "companion", nil, "also carry the files of the checkpoint's directory matching `GLOB` (a base-name pattern; repeatable)")
	cmd.Flags().BoolVar(&f.none, "no-companions", false, "carry no companion files (config, tokenizer, licence, model card)")
}

// find lists the companions of the checkpoint s: the files of its
// directory (a single file's own directory, an index's, a directory's)
// matching the default names and the --companion patterns, each checked
// as pack will carry it. A pattern with a path separator is a usage error.
func (f *companionFlags) find(s *convert.Source) ([]pack.Companion, error) {
	if f.none {
		if len(f.extra) > 0 {
			return nil, usagef("--no-companions and --companion %q contradict each other", f.extra[0])
		}
		return nil, nil
	}
	for _, g := range f.extra {
		if strings.ContainsAny(g, `/\`) {
			return nil, usagef("--companion %q: give a base-name pattern, matched in the checkpoint's directory", g)
		}
		if _, err := filepath.Match(g, ""); err != nil {
			return nil, usagef("--companion %q: %v", g, err)
		}
	}
	dir := filepath.Dir(s.Path)
	cs, err := pack.FindCompanions(dir, append(append([]string{}, pack.DefaultCompanionGlobs...), f.extra...))
	if err != nil {
		return nil, err
	}
	// the source's own files are its weights, not companions
	weights := map[string]bool{}
	for _, sf := range s.Files {
		weights[filepath.Base(sf.Path)] = true
	}
	weights[filepath.Base(s.Path)] = true
	out := cs[:0]
	for _, c := range cs {
		if !weights[c.Name] {
			out = append(out, c)
		}
	}
	for _, c := range out {
		if err := pack.CheckCompanion(c); err != nil {
			return nil, fmt.Errorf("%w (leave it out with --no-companions)", err)
		}
	}
	return out, nil
}

// warnUnmatched warns on stderr about each --companion pattern that
// selects none of the companions cs (a typo, or a pattern matching only
// the weights), as pack warns about a policy rule that matches no tensor.
func (f *companionFlags) warnUnmatched(w *warnings, s *convert.Source, cs []pack.Companion) {
	for _, g := range f.extra {
		if !slices.ContainsFunc(cs, func(c pack.Companion) bool { ok, _ := filepath.Match(g, c.Name); return ok }) {
			w.add("--companion %q selects no companion file in %s", g, filepath.Dir(s.Path))
		}
	}
}

// noteCompanionsLeftOut tells on stderr that unpack -o FILE.safetensors
// wrote the weights without the artifact's companions, and how to get them.
func noteCompanionsLeftOut(stderr io.Writer, a *pack.Artifact) {
	cs := a.Companions()
	if len(cs) == 0 {
		return
	}
	names := make([]string, len(cs))
	for i, c := range cs {
		names[i] = c.Name
	}
	fmt.Fprintf(stderr, "note: %d companion files not written (%s): unpack -o DIR writes them beside the weights\n",
		len(cs), strings.Join(names, ", "))
}
