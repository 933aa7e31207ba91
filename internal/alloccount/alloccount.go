// Package alloccount measures the heap bytes a call allocates, so that
// fuzz targets can check that decoding untrusted input allocates no more
// than the input declares.
package alloccount

import "runtime"

// Bytes returns the heap bytes allocated while fn runs. It counts every
// goroutine's allocations, so callers compare it with a generous bound.
func Bytes(fn func()) uint64 {
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	fn()
	runtime.ReadMemStats(&after)
	return after.TotalAlloc - before.TotalAlloc
}
