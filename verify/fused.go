package verify

import (
	"io"

	"ternkit/internal/treehash"
)

// fuseBlock is the span of a section hashed and then checked while it is
// still in the core's cache: 64 chunks, so that every whole block is a
// complete BLAKE3 subtree wherever a piece or section starts (both start
// at a multiple of it).
const fuseBlock = 64 * treehash.ChunkSize

// hashChecking adds data to h, where it starts at chunk number counter (a
// multiple of fuseBlock/treehash.ChunkSize), a block at a time,
// and writes each block to sink, when there is one, right after hashing
// it. It stops writing to sink after sink's first error and returns it.
func hashChecking(h *treehash.Hasher, data []byte, counter uint64, sink io.Writer) error {
	var sinkErr error
	for len(data) > 0 {
		n := min(len(data), fuseBlock)
		block := data[:n]
		// a whole block is a subtree, and the last one too may be the root
		// (AddSubtree keeps it pending); it fits unless h was misused, and
		// then the bytes are written instead, which always holds
		if n < fuseBlock || !h.AddSubtree(treehash.Subtree(block, counter)) {
			h.Write(block)
		}
		if sink != nil && sinkErr == nil {
			_, sinkErr = sink.Write(block)
		}
		data = data[n:]
		counter += uint64(n / treehash.ChunkSize)
	}
	return sinkErr
}
