// Package ctest holds the tests of the C reader in reader/c: they build it
// with gcc and clang (no cgo in the module) and compare what it reads with
// the pack package's reader, the test vectors and outside tools.
package ctest
