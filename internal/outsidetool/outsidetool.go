// Package outsidetool finds the outside programs tests check ternkit
// against (b3sum, zstd, gcc, openssl, ...): a test skips when one is
// missing, except in CI, where .ci/run installs them all and a missing one
// fails the test.
package outsidetool

import (
	"os"
	"os/exec"
	"testing"
)

// Require returns the path of program name, from Debian package pkg. It
// fails t when the program is missing and the CI environment variable is
// set, and skips t when it is missing otherwise.
func Require(t testing.TB, name, pkg string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s not found: CI must install it (.ci/run: apt-get install %s)", name, pkg)
		}
		t.Skipf("%s not found; install it to run this check (apt-get install %s)", name, pkg)
	}
	return p
}
