// Command ternkit turns float safetensors checkpoints into verified ternary
// artifacts: pack, verify, inspect, and a self-contained demo.
package main

import (
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/spf13/cobra"

	"ternkit/internal/textsafe"
	"ternkit/pack"
)

// version is recorded in every manifest this build writes.
const version = "0.1.0"

// Exit codes (README, "Exit codes").
const (
	exitOK     = 0
	exitFailed = 1 // verification failed
	exitInput  = 2 // usage or input error
)

// caution is printed wherever ternkit reports a result a release could rely on.
const caution = "caution: ternarizing a model that was not trained for ternary weights loses much accuracy; " +
	"a passing verify proves bytes and bounds, not task quality: evaluate the model before deployment and follow your organisation's release practice"

// errVerifyFailed marks a run whose checks failed (exit 1); the report has
// already been printed.
var errVerifyFailed = errors.New("verification failed")

// corruptError marks an artifact found corrupt while reading it (exit 1,
// like a failed verification).
type corruptError struct{ err error }

func (e corruptError) Error() string { return e.err.Error() }
func (e corruptError) Unwrap() error { return e.err }

// asCorrupt marks errors that say the artifact's bytes are wrong (a hash
// mismatch, an invalid code) as corruptError; others pass unchanged.
func asCorrupt(err error) error {
	if errors.Is(err, pack.ErrHash) || errors.Is(err, pack.ErrInvalidCode) || errors.Is(err, pack.ErrStructure) {
		return corruptError{err}
	}
	return err
}

// usageError marks a problem with the command line (exit 2).
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func usagef(format string, args ...any) error {
	return usageError{fmt.Errorf(format, args...)}
}

func main() {
	setMemoryLimit()
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run executes the command line and returns the exit code.
func run(args []string, stdout, stderr io.Writer) int {
	root := newRootCmd(stdout, stderr)
	root.SetArgs(args)
	err := root.Execute()
	switch {
	case err == nil:
		return exitOK
	case errors.Is(err, errVerifyFailed):
		return exitFailed
	case errors.As(err, new(corruptError)):
		fmt.Fprintf(stderr, "ternkit: %v\n", err)
		return exitFailed
	default:
		fmt.Fprintf(stderr, "ternkit: %s\n", textsafe.EscapeLines(err.Error()))
		return exitInput
	}
}

func newRootCmd(stdout, stderr io.Writer) *cobra.Command {
	root := &cobra.Command{
		Use:   "ternkit",
		Short: "Turn float safetensors checkpoints into verified ternary artifacts",
		Long: `ternkit converts a float safetensors checkpoint into a compact ternary
artifact (weights in {-1, 0, +1} times a per-tensor scale, absmean method),
verifies it byte for byte and against its source, and shows what is inside.

` + caution + `.`,
		Version:       version,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetOut(stdout)
	root.SetErr(stderr)
	root.SetFlagErrorFunc(flagError)
	root.PersistentFlags().BoolP(quietFlag, "q", false, "print nothing on success: no progress bar, result line, warning or caution (errors still go to stderr; --json output is printed)")
	root.PersistentFlags().Bool(strictFlag, false, "treat every warning as an error (exit 2): unmatched rules, budget limits and patterns, unknown dtype names, statistics no budget covers; also TERNKIT_STRICT=1")
	root.AddCommand(newPackCmd(), newVerifyCmd(), newInspectCmd(), newDemoCmd(), newReportCmd(),
		newKeygenCmd(), newSignCmd(), newDiffCmd(), newUnpackCmd(), newProbeCmd())
	registerProfileFlag(root)
	finishCommands(root)
	for _, c := range root.Commands() {
		c.SetFlagErrorFunc(flagError)
	}
	return root
}

// exactArgs is cobra.ExactArgs with a message that names the command's usage.
func exactArgs(n int) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		if len(args) != n {
			return usagef("%s takes %d argument(s), got %d (usage: %s)", cmd.Name(), n, len(args), cmd.UseLine())
		}
		return nil
	}
}
