//go:build !amd64

package pack

var haveWideCount = false

func countBits2Wide(p []byte) (pos, neg uint64, ok bool) { panic("unreachable") }
