//go:build !amd64

package pack

// Without vector encoders the word-at-a-time code runs; these are never
// called.
const useAVX2 = false

func encodeBits2AVX2(*byte, *int8, int) { panic("unreachable") }
func encodeBase3AVX2(*byte, *int8, int) { panic("unreachable") }
