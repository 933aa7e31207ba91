package main

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"ternkit/convert"
	"ternkit/internal/inputfile"
	"ternkit/pack"
)

// Errors that suggest the fix: a close valid value for a typo, and the
// command that fits a file of the other kind.

// didYouMean returns `; did you mean "x"?` for the valid value closest to
// s, or "" when none is close.
func didYouMean(s string, valid []string) string {
	if best := closest(s, valid); best != "" {
		return fmt.Sprintf("; did you mean %q?", best)
	}
	return ""
}

// closest is the valid value within two edits of s, or starting with s,
// with the fewest edits; "" when there is none.
func closest(s string, valid []string) string {
	best, bestDist := "", 3
	for _, v := range valid {
		d := editDistance(strings.ToLower(s), strings.ToLower(v))
		if len(s) >= 2 && strings.HasPrefix(v, s) {
			d = min(d, 1)
		}
		if d < bestDist {
			best, bestDist = v, d
		}
	}
	return best
}

// editDistance is the Levenshtein distance between a and b, in bytes.
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

// flagError marks a bad flag as a usage error (exit 2) and, for an
// unknown flag, names the closest flag the command has.
func flagError(cmd *cobra.Command, err error) error {
	msg := err.Error()
	name, ok := strings.CutPrefix(msg, "unknown flag: --")
	if !ok {
		return usageError{err}
	}
	name, _, _ = strings.Cut(name, "=")
	var names []string
	cmd.Flags().VisitAll(func(f *pflag.Flag) { names = append(names, f.Name) })
	if best := closest(name, names); best != "" {
		return usageError{fmt.Errorf("%w; did you mean --%s? (see ternkit %s --help)", err, best, cmd.Name())}
	}
	return usageError{fmt.Errorf("%w (see ternkit %s --help)", err, cmd.Name())}
}

// hintError is an error with advice on a line of its own.
type hintError struct {
	err  error
	hint string
}

func (e hintError) Error() string { return e.err.Error() + "\nhint: " + e.hint }
func (e hintError) Unwrap() error { return e.err }

// isArtifact reports whether path opens as an artifact.
func isArtifact(path string) bool {
	a, err := pack.Open(path)
	if err != nil {
		return false
	}
	a.Close()
	return true
}

// isCheckpoint reports whether path opens as a safetensors checkpoint.
func isCheckpoint(path string) bool {
	s, err := convert.Open(path)
	if err != nil {
		return false
	}
	s.Close()
	return true
}

// withHint adds advice to an error about an artifact argument that is in
// fact a checkpoint.
func withHint(err error, artifact string) error {
	if !errors.Is(err, pack.ErrNotArtifact) || !isCheckpoint(artifact) {
		return err
	}
	return hintError{err, fmt.Sprintf("%s is a safetensors checkpoint; pack it first: ternkit pack %s -o OUT%s", artifact, artifact, pack.Extension)}
}

// checkpointHint adds advice to an error about a checkpoint argument that
// is in fact an artifact.
func checkpointHint(err error, checkpoint string) error {
	if !isArtifact(checkpoint) {
		return err
	}
	return hintError{err, fmt.Sprintf("%s is already a ternkit artifact; to see inside it: ternkit inspect %s", checkpoint, checkpoint)}
}

// notArtifact reports whether the file at path is no artifact at all: its
// first bytes are not the artifact magic (an empty or unreadable file is
// not known to be one or the other).
func notArtifact(path string) bool {
	f, err := inputfile.Open(path) // never blocks on a named pipe
	if err != nil {
		return false
	}
	defer f.Close()
	head := make([]byte, 8)
	n, _ := io.ReadFull(f, head)
	return n > 0 && !pack.StartsLikeArtifact(head[:n])
}

// artifactError classifies an error from opening or reading an artifact
// argument: a file that is not an artifact at all is an input error (exit
// 2, with a hint when it is a checkpoint); a damaged artifact is corrupt
// (exit 1); anything else passes unchanged.
func artifactError(err error, path string) error {
	if err == nil {
		return nil
	}
	if errors.Is(err, pack.ErrNotArtifact) || notArtifact(path) {
		return notArtifactError(err, path)
	}
	return asCorrupt(err)
}

// notArtifactError is the input error for a file that is not an artifact.
func notArtifactError(err error, path string) error {
	if !errors.Is(err, pack.ErrNotArtifact) {
		err = fmt.Errorf("%s: %w: its first bytes are not the artifact magic (%v)", path, pack.ErrNotArtifact, err)
	}
	return withHint(err, path)
}
