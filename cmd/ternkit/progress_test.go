//go:build linux

package main

import (
	"bytes"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"golang.org/x/sys/unix"
)

// openPTY opens a pseudo-terminal pair through /dev/ptmx (Linux devpts):
// unlock the slave, ask its number, open /dev/pts/N.
func openPTY(t *testing.T) (master, slave *os.File) {
	t.Helper()
	m, err := os.OpenFile("/dev/ptmx", os.O_RDWR|unix.O_NOCTTY, 0)
	if err != nil {
		skipWithoutPTY(t, "no pseudo-terminal here (%v): the terminal case is not tested", err)
	}
	if err := unix.IoctlSetPointerInt(int(m.Fd()), unix.TIOCSPTLCK, 0); err != nil {
		m.Close()
		skipWithoutPTY(t, "unlock pseudo-terminal: %v", err)
	}
	n, err := unix.IoctlGetInt(int(m.Fd()), unix.TIOCGPTN)
	if err != nil {
		m.Close()
		skipWithoutPTY(t, "pseudo-terminal number: %v", err)
	}
	s, err := os.OpenFile("/dev/pts/"+strconv.Itoa(n), os.O_RDWR|unix.O_NOCTTY, 0)
	if err != nil {
		m.Close()
		skipWithoutPTY(t, "open pseudo-terminal slave: %v", err)
	}
	return m, s
}

// runOnTerminal runs the command line with stderr on a pseudo-terminal and
// returns exit code, stdout and everything written to the terminal.
func runOnTerminal(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	master, slave := openPTY(t)
	defer master.Close()
	require.True(t, isTerminal(slave), "the pseudo-terminal slave is a terminal")
	var screen bytes.Buffer
	copied := make(chan struct{})
	go func() {
		io.Copy(&screen, master) // ends with EIO once the slave is closed
		close(copied)
	}()
	var out bytes.Buffer
	code := run(args, &out, slave)
	slave.Close()
	<-copied
	return code, out.String(), screen.String()
}

// hasBar reports whether s holds a drawn bar: after a carriage return, the
// label, a percentage, the bar and bytes done of the total.
func hasBar(s, label string) bool {
	return regexp.MustCompile(`\r` + regexp.QuoteMeta(label) + ` +\d+% \|[^|]*\| \( *[0-9.]+ [KMG]?i?B/[0-9.]+ [KMG]?i?B`).MatchString(s)
}

func TestProgressOnlyOnTerminal(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)

	t.Run("terminal", func(t *testing.T) {
		code, out, screen := runOnTerminal(t, "pack", src, "-o", filepath.Join(dir, "tty.tkart"))
		require.Equal(t, exitOK, code, screen)
		require.True(t, hasBar(screen, "pack"), "bar drawn on the terminal: %q", screen)
		t.Logf("terminal: %q", screen)
		require.False(t, strings.Contains(out, "\r"), "nothing of the bar on stdout: %q", out)

		code, _, screen = runOnTerminal(t, "verify", art, "--against", src)
		require.Equal(t, exitOK, code, screen)
		require.True(t, hasBar(screen, "verify"), "bar drawn on the terminal: %q", screen)
	})
	t.Run("terminal, --json", func(t *testing.T) {
		code, out, screen := runOnTerminal(t, "verify", art, "--json")
		require.Equal(t, exitOK, code, screen)
		require.True(t, hasBar(screen, "verify"), "%q", screen)
		var rep map[string]any
		require.NoError(t, json.Unmarshal([]byte(out), &rep), "stdout is JSON alone")
	})
	t.Run("terminal, --quiet", func(t *testing.T) {
		for _, args := range [][]string{
			{"pack", src, "-o", filepath.Join(dir, "quiet.tkart"), "--quiet"},
			{"-q", "verify", art, "--against", src},
		} {
			code, _, screen := runOnTerminal(t, args...)
			require.Equal(t, exitOK, code, screen)
			require.False(t, hasBar(screen, args[0]) || hasBar(screen, args[1]), "%v: no bar: %q", args, screen)
		}
	})
	t.Run("pipe", func(t *testing.T) {
		r, w, err := os.Pipe()
		require.NoError(t, err)
		var piped bytes.Buffer
		copied := make(chan struct{})
		go func() { io.Copy(&piped, r); close(copied) }()
		require.False(t, isTerminal(w))
		var out bytes.Buffer
		code := run([]string{"pack", src, "-o", filepath.Join(dir, "pipe.tkart")}, &out, w)
		w.Close()
		<-copied
		require.Equal(t, exitOK, code, piped.String())
		require.False(t, hasBar(piped.String(), "pack"), "%q", piped.String())
		require.NotContains(t, piped.String(), "\r")
		require.Contains(t, piped.String(), "caution:", "stderr still carries the caution")
	})
	t.Run("buffer", func(t *testing.T) {
		code, out, errOut := ternkit("verify", art, "--against", src)
		require.Equal(t, exitOK, code)
		require.NotContains(t, out+errOut, "\r")
	})
}
