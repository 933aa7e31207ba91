package main

import (
	"fmt"
	"os"
	"runtime/debug"
	"runtime/pprof"

	"github.com/spf13/cobra"
)

// cpuProfileFlag names the hidden root flag that writes a CPU profile of the
// command (go tool pprof reads it); for contributors measuring hot paths.
const cpuProfileFlag = "cpuprofile"

// softMemoryLimit is the heap size at which the garbage collector works
// harder (GOMEMLIMIT overrides it): pack and verify hold a bounded number
// of tensors, and collecting before the heap doubles keeps the resident
// size near that bound.
const softMemoryLimit = 384 << 20

// setMemoryLimit applies softMemoryLimit unless GOMEMLIMIT is set.
func setMemoryLimit() {
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(softMemoryLimit)
	}
}

func registerProfileFlag(root *cobra.Command) {
	root.PersistentFlags().String(cpuProfileFlag, "", "write a CPU profile of the command to `FILE` (go tool pprof)")
	_ = root.PersistentFlags().MarkHidden(cpuProfileFlag)
	registerTraceFlag(root)
	root.PersistentPreRunE = func(cmd *cobra.Command, _ []string) error {
		if err := startTrace(cmd); err != nil {
			return err
		}
		path, _ := cmd.Flags().GetString(cpuProfileFlag)
		if path == "" {
			return nil
		}
		f, err := os.Create(path)
		if err != nil {
			return fmt.Errorf("--%s: %w", cpuProfileFlag, err)
		}
		if err := pprof.StartCPUProfile(f); err != nil {
			f.Close()
			return fmt.Errorf("--%s: %w", cpuProfileFlag, err)
		}
		cobra.OnFinalize(func() {
			pprof.StopCPUProfile()
			f.Close()
		})
		return nil
	}
}
