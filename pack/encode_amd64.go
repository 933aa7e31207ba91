package pack

import "golang.org/x/sys/cpu"

// useAVX2 selects the vector encoders of encode_amd64.s.
var useAVX2 = cpu.X86.HasAVX2

// encodeBits2AVX2 writes the n/4 bits2 bytes of n trits, n a positive
// multiple of 32.
//
//go:noescape
func encodeBits2AVX2(dst *byte, src *int8, n int)

// encodeBase3AVX2 writes the n/5 base3 bytes of n trits, n a positive
// multiple of 20; it reads 6 bytes past them.
//
//go:noescape
func encodeBase3AVX2(dst *byte, src *int8, n int)
