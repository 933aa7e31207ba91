package pack

import "golang.org/x/sys/cpu"

// haveWideCount: 512-bit registers and their population count.
var haveWideCount = cpu.X86.HasAVX512F && cpu.X86.HasAVX512VPOPCNTDQ

// countBits2Wide counts the low bits (+1) and the high bits (−1) of the
// 2-bit codes in p, 64 bytes at a time, and reports ok false when any
// code is 3 (both bits). len(p) must be a multiple of 64.
//
//go:noescape
func countBits2Wide(p []byte) (pos, neg uint64, ok bool)
