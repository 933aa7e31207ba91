//go:build !unix

package inputfile

const nonblock = 0
