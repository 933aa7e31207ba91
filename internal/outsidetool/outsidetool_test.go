package outsidetool

import (
	"testing"
)

// A program every Debian system has is found; a missing one skips the
// test outside CI and fails it in CI.
func TestRequire(t *testing.T) {
	if p := Require(t, "sh", "dash"); p == "" {
		t.Fatal("sh: empty path")
	}
	t.Setenv("CI", "")
	var skipped, failed bool
	ft := &fakeT{T: t}
	func() {
		defer func() { recover() }()
		Require(ft, "ternkit-no-such-program", "none")
	}()
	skipped, failed = ft.skipped, ft.failed
	if !skipped || failed {
		t.Fatalf("outside CI: skipped %v failed %v, want a skip", skipped, failed)
	}
	t.Setenv("CI", "true")
	ft = &fakeT{T: t}
	func() {
		defer func() { recover() }()
		Require(ft, "ternkit-no-such-program", "none")
	}()
	if ft.skipped || !ft.failed {
		t.Fatalf("in CI: skipped %v failed %v, want a failure", ft.skipped, ft.failed)
	}
}

// fakeT records a skip or a failure instead of ending the test.
type fakeT struct {
	*testing.T
	skipped, failed bool
}

type stop struct{}

func (f *fakeT) Helper()               {}
func (f *fakeT) Skipf(string, ...any)  { f.skipped = true; panic(stop{}) }
func (f *fakeT) Fatalf(string, ...any) { f.failed = true; panic(stop{}) }
