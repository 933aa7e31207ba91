package filedigest

import (
	"crypto/sha256"
	"encoding/hex"
	"runtime"

	"ternkit/internal/treehash"
)

// Bytes returns the digests of p: BLAKE3 by the BLAKE3 tree on up to
// workers goroutines (0: one per CPU), SHA-256 (one pass, which no tree
// splits) beside it on a goroutine of its own.
func Bytes(p []byte, workers int) Digests {
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	done := make(chan [sha256.Size]byte, 1)
	go func() { done <- sha256.Sum256(p) }()
	b3 := treehash.Sum256(p, max(1, workers-1))
	s2 := <-done
	return Digests{BLAKE3: hex.EncodeToString(b3[:]), SHA256: hex.EncodeToString(s2[:])}
}
