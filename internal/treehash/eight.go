package treehash

import "lukechampine.com/blake3/guts"

var ivWords = guts.IV

// eightCVsGeneric is eightCVs one chunk at a time.
func eightCVsGeneric(input *[8192]byte, counter uint64) (cvs [8][8]uint32) {
	for i := range 8 {
		cvs[i] = guts.ChainingValue(guts.CompressChunk(input[i*ChunkSize:(i+1)*ChunkSize], &guts.IV, counter+uint64(i), 0))
	}
	return cvs
}

// parentsGeneric replaces each pair of cvs (an even number) by the
// chaining value of their parent, in place, and returns the halved slice.
func parentsGeneric(cvs [][8]uint32) [][8]uint32 {
	for i := range len(cvs) / 2 {
		cvs[i] = guts.ChainingValue(guts.ParentNode(cvs[2*i], cvs[2*i+1], &guts.IV, 0))
	}
	return cvs[:len(cvs)/2]
}
