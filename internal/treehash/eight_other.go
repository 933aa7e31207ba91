//go:build !amd64

package treehash

func eightCVs(input *[8192]byte, counter uint64) [8][8]uint32 {
	return eightCVsGeneric(input, counter)
}

func parents(cvs [][8]uint32) [][8]uint32 { return parentsGeneric(cvs) }
