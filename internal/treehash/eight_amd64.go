package treehash

import (
	"golang.org/x/sys/cpu"
	"lukechampine.com/blake3/guts"
)

var (
	haveAVX2 = cpu.X86.HasAVX2
	// haveRotate: the AVX-512VL rotate on 256-bit registers, one
	// instruction for each of BLAKE3's rotations (eight512_amd64.s)
	haveRotate = haveAVX2 && cpu.X86.HasAVX512F && cpu.X86.HasAVX512VL
)

// compressEight compresses the chunks in input[:length] (at most eight,
// numbered from counter) and stores chunk i's chaining value word w at
// out[i+8w]; chain receives the last block's input chaining value.
//
//go:noescape
func compressEight(input *[8192]byte, length, counter uint64, flags uint32, key *[8]uint32, out *[64]uint32, chain *[8]uint32)

// compressEight512 is compressEight with the AVX-512VL rotate.
//
//go:noescape
func compressEight512(input *[8192]byte, length, counter uint64, flags uint32, key *[8]uint32, out *[64]uint32, chain *[8]uint32)

//go:noescape
func compressParents(left, right *[64]uint32, flags uint32, key *[8]uint32, out *[64]uint32, n int)

// compressParents512 is compressParents with the AVX-512VL rotate.
//
//go:noescape
func compressParents512(left, right *[64]uint32, flags uint32, key *[8]uint32, out *[64]uint32, n int)

// eightCVs returns the chaining values of the eight whole chunks in input,
// the first numbered counter.
func eightCVs(input *[8192]byte, counter uint64) (cvs [8][8]uint32) {
	if !haveAVX2 {
		return eightCVsGeneric(input, counter)
	}
	var out [64]uint32
	var chain [8]uint32
	if haveRotate {
		compressEight512(input, 8192, counter, 0, &ivWords, &out, &chain)
	} else {
		compressEight(input, 8192, counter, 0, &ivWords, &out, &chain)
	}
	for i := range 8 {
		for w := range 8 {
			cvs[i][w] = out[i+8*w]
		}
	}
	return cvs
}

// parents is parentsGeneric eight parents at a time.
func parents(cvs [][8]uint32) [][8]uint32 {
	if !haveAVX2 {
		return parentsGeneric(cvs)
	}
	var left, right, out [64]uint32
	n := len(cvs) / 2
	for base := 0; base < n; base += 8 {
		k := min(8, n-base)
		for i := range k {
			l, r := &cvs[2*(base+i)], &cvs[2*(base+i)+1]
			for w := range 8 {
				left[i+8*w], right[i+8*w] = l[w], r[w]
			}
		}
		if haveRotate {
			compressParents512(&left, &right, guts.FlagParent, &ivWords, &out, k)
		} else {
			compressParents(&left, &right, guts.FlagParent, &ivWords, &out, k)
		}
		for i := range k {
			for w := range 8 {
				cvs[base+i][w] = out[i+8*w]
			}
		}
	}
	return cvs[:n]
}
