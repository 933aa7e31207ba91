//go:build linux

package main

import (
	"fmt"
	"os"
	"testing"
)

// skipWithoutPTY skips a terminal test where no pseudo-terminal can be
// opened, but fails it under CI, which runs on Linux with devpts: there the
// terminal case must be tested, like every check on an outside tool.
func skipWithoutPTY(t *testing.T, format string, args ...any) {
	t.Helper()
	msg := fmt.Sprintf(format, args...)
	if os.Getenv("CI") != "" {
		t.Fatalf("%s; CI must provide /dev/ptmx and /dev/pts", msg)
	}
	t.Skip(msg)
}
