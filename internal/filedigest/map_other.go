//go:build !unix

package filedigest

// FileWorkers is File where files are not mapped.
func FileWorkers(path string, _ int) (Digests, error) { return File(path) }
