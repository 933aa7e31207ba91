package main

import (
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"ternkit/internal/textsafe"
)

// Warnings and strict mode. Every command gathers what it warns about in
// one warnings value: the lines go to stderr (unless --quiet) and into the
// command's --json output under "warnings". Under --strict (or
// TERNKIT_STRICT=1) a command with warnings fails with exit 2 instead, before
// it writes anything it can still avoid writing.

// strictFlag is the root's persistent flag that turns warnings into errors.
const strictFlag = "strict"

// strictEnv set to 1 (or true) turns on strict mode like --strict.
const strictEnv = "TERNKIT_STRICT"

// warnings collects a command's warnings.
type warnings struct {
	list   []string
	strict bool
	quiet  bool
	stderr io.Writer
}

// newWarnings reads --strict, TERNKIT_STRICT and --quiet for cmd.
func newWarnings(cmd *cobra.Command) *warnings {
	strict, _ := cmd.Flags().GetBool(strictFlag)
	switch strings.ToLower(strings.TrimSpace(os.Getenv(strictEnv))) {
	case "1", "true", "yes", "on":
		strict = true
	}
	return &warnings{strict: strict, quiet: quiet(cmd), stderr: cmd.ErrOrStderr()}
}

// quiet reports whether --quiet was given.
func quiet(cmd *cobra.Command) bool {
	q, _ := cmd.Flags().GetBool(quietFlag)
	return q
}

// add records a warning and, unless quiet or strict (where check reports
// it), prints it on stderr.
func (w *warnings) add(format string, args ...any) {
	msg := fmt.Sprintf(format, args...)
	w.list = append(w.list, msg)
	if !w.quiet && !w.strict {
		fmt.Fprintf(w.stderr, "ternkit: warning: %s\n", textsafe.Escape(msg))
	}
}

// note prints what was not checked and why on stderr (unless quiet); a
// note is not a warning, so strict mode lets it pass.
func (w *warnings) note(format string, args ...any) {
	if !w.quiet {
		fmt.Fprintf(w.stderr, "ternkit: note: %s\n", textsafe.Escape(fmt.Sprintf(format, args...)))
	}
}

// addAll records warnings made elsewhere (a library's list).
func (w *warnings) addAll(msgs []string) {
	for _, m := range msgs {
		w.add("%s", m)
	}
}

// check is the strict-mode gate: nil when not strict or when there is no
// warning, else a usage error (exit 2) listing them.
func (w *warnings) check() error {
	if !w.strict || len(w.list) == 0 {
		return nil
	}
	return usageError{fmt.Errorf("--strict: %d warning(s) are errors:\n  %s", len(w.list), strings.Join(w.list, "\n  "))}
}

// JSON is the list for --json output: never null.
func (w *warnings) JSON() []string {
	if w.list == nil {
		return []string{}
	}
	return w.list
}
