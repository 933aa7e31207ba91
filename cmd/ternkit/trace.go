package main

import (
	"fmt"
	"os"
	"runtime/trace"

	"github.com/spf13/cobra"
)

// traceFlag names the hidden root flag that writes an execution trace of
// the command (go tool trace reads it): where goroutines run, block and
// wait, for contributors looking for idle cores.
const traceFlag = "trace"

func registerTraceFlag(root *cobra.Command) {
	root.PersistentFlags().String(traceFlag, "", "write an execution trace of the command to `FILE` (go tool trace)")
	_ = root.PersistentFlags().MarkHidden(traceFlag)
}

// startTrace starts the execution trace --trace asks for, if any, stopped
// when the command finishes.
func startTrace(cmd *cobra.Command) error {
	path, _ := cmd.Flags().GetString(traceFlag)
	if path == "" {
		return nil
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("--%s: %w", traceFlag, err)
	}
	if err := trace.Start(f); err != nil {
		f.Close()
		return fmt.Errorf("--%s: %w", traceFlag, err)
	}
	cobra.OnFinalize(func() {
		trace.Stop()
		f.Close()
	})
	return nil
}
