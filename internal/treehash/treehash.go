// Package treehash computes BLAKE3 hashes from pieces: chaining values of
// complete subtrees computed apart (in parallel, or where the bytes
// already are) and joined in order into the hash of the whole, the same
// hash as one pass over the bytes (b3sum).
//
// BLAKE3 splits its input into chunks of 1024 bytes, numbered from 0; a
// complete subtree is 2^k whole chunks whose first chunk number is a
// multiple of 2^k. Its chaining value depends on its bytes and on that
// first chunk number, so the same bytes at another place give another
// value. The root output (the hash) is taken from the last node to be
// joined, with the root flag; every other node gives a chaining value.
package treehash

import (
	"encoding/binary"
	"math/bits"
	"sync"

	"lukechampine.com/blake3/guts"
)

// ChunkSize is BLAKE3's chunk, the unit of the tree.
const ChunkSize = guts.ChunkSize

// A CV is a chaining value: the first 32 bytes of a node's output.
type CV [32]byte

// A Node is a complete subtree (or the partial last chunk of a Hasher),
// not yet compressed into a chaining value, so that it can still become
// the root.
type Node struct {
	n      guts.Node
	at     uint64 // its first chunk's number
	chunks uint64 // its length in chunks, a power of two
}

// CV returns n's chaining value (n not being the root).
func (n Node) CV() CV { return wordsCV(guts.ChainingValue(n.n)) }

// Chunks returns n's length in chunks.
func (n Node) Chunks() uint64 { return n.chunks }

func wordsCV(w [8]uint32) CV {
	var c CV
	for i, x := range w {
		binary.LittleEndian.PutUint32(c[4*i:], x)
	}
	return c
}

func cvWords(c CV) [8]uint32 {
	var w [8]uint32
	for i := range w {
		w[i] = binary.LittleEndian.Uint32(c[4*i:])
	}
	return w
}

// Subtree compresses data, 2^k whole chunks (k >= 0) whose first chunk is
// number counter, a multiple of 2^k, into its node. It panics on any other
// length or an unaligned counter: callers decompose ranges with Spans.
func Subtree(data []byte, counter uint64) Node {
	chunks := uint64(len(data) / ChunkSize)
	if len(data)%ChunkSize != 0 || bits.OnesCount64(chunks) != 1 || counter%chunks != 0 {
		panic("treehash: subtree of an unaligned or non-power-of-two length")
	}
	return Node{n: subtree(data, counter), at: counter, chunks: chunks}
}

const simd = guts.MaxSIMD // chunks one buffer compression takes

func subtree(data []byte, counter uint64) guts.Node {
	chunks := len(data) / ChunkSize
	if chunks == 1 {
		return guts.CompressChunk(data, &guts.IV, counter, 0)
	}
	if chunks < 8 {
		var buf [simd * ChunkSize]byte
		copy(buf[:], data)
		return guts.CompressBuffer(&buf, len(data), &guts.IV, counter, 0)
	}
	// groups of 8 chunks, then their parents level by level (a parent
	// costs one compression against 16 per chunk)
	var small [64][8]uint32 // a subtree of up to 64 chunks needs no heap
	cvs := small[:0]
	if chunks > len(small) {
		cvs = make([][8]uint32, 0, chunks)
	}
	for i := 0; i < chunks; i += 8 {
		eight := eightCVs((*[8 * ChunkSize]byte)(data[i*ChunkSize:]), counter+uint64(i))
		cvs = append(cvs, eight[:]...)
	}
	for len(cvs) > 2 {
		cvs = parents(cvs)
	}
	return guts.ParentNode(cvs[0], cvs[1], &guts.IV, 0)
}

// Spans returns the lengths, in chunks, of the complete subtrees that
// cover chunks counter … counter+chunks−1 in order, each as large as its
// alignment allows.
func Spans(counter, chunks uint64) []uint64 {
	var out []uint64
	for i := counter; i < counter+chunks; {
		k := min(bits.TrailingZeros64(i), bits.Len64(counter+chunks-i)-1)
		out = append(out, 1<<k)
		i += 1 << k
	}
	return out
}

// A Hasher joins bytes and subtree nodes, given in order, into a BLAKE3
// hash (Sum) or, for a Hasher that starts inside a larger tree, the
// chaining value of what it was given (CV). The zero value is not ready:
// use New or NewAt.
type Hasher struct {
	start   uint64 // the first chunk's number
	done    uint64 // chunks joined into the stack, from start
	stack   [64][8]uint32
	buf     [ChunkSize]byte
	buflen  int
	pending *Node // the last subtree given, not yet known not to be last
}

// New returns a Hasher for a whole input (chunk numbers from 0).
func New() *Hasher { return &Hasher{} }

// NewAt returns a Hasher for bytes that start at chunk number counter of
// a larger input; its CV is that of the node those bytes form in the
// larger tree when counter is a multiple of a power of two at least as
// large as their length in chunks (true, for instance, of equal pieces of
// 2^k chunks and of the last, shorter one).
func NewAt(counter uint64) *Hasher { return &Hasher{start: counter} }

// Len returns the bytes given so far.
func (h *Hasher) Len() int64 {
	n := int64(h.done)*ChunkSize + int64(h.buflen)
	if h.pending != nil {
		n += int64(h.pending.chunks) * ChunkSize
	}
	return n
}

func (h *Hasher) push(cv [8]uint32, chunks uint64) {
	i := bits.TrailingZeros64(chunks)
	for h.done&(1<<i) != 0 {
		cv = guts.ChainingValue(guts.ParentNode(h.stack[i], cv, &guts.IV, 0))
		i++
	}
	h.stack[i] = cv
	h.done += chunks
}

func (h *Hasher) flushPending() {
	if h.pending != nil {
		h.push(guts.ChainingValue(h.pending.n), h.pending.chunks)
		h.pending = nil
	}
}

// Write adds bytes. It never fails.
func (h *Hasher) Write(p []byte) (int, error) {
	n := len(p)
	if n == 0 {
		return 0, nil
	}
	h.flushPending()
	if h.buflen > 0 {
		c := copy(h.buf[h.buflen:], p)
		h.buflen += c
		p = p[c:]
	}
	if h.buflen == ChunkSize && len(p) > 0 {
		h.push(guts.ChainingValue(guts.CompressChunk(h.buf[:], &guts.IV, h.start+h.done, 0)), 1)
		h.buflen = 0
	}
	if len(p) > ChunkSize {
		rem := len(p) % ChunkSize
		if rem == 0 {
			rem = ChunkSize // the last chunk waits: it may be the root
		}
		body := p[:len(p)-rem]
		for _, c := range Spans(h.start+h.done, uint64(len(body)/ChunkSize)) {
			size := int(c) * ChunkSize
			h.push(guts.ChainingValue(subtree(body[:size], h.start+h.done)), c)
			body = body[size:]
		}
		p = p[len(p)-rem:]
	}
	h.buflen += copy(h.buf[h.buflen:], p)
	return n, nil
}

// AddSubtree adds a node made by Subtree, which must start where the bytes
// given so far end: a whole number of chunks, at n's chunk number. It
// reports false, adding nothing, when it does not fit there.
func (h *Hasher) AddSubtree(n Node) bool {
	if h.buflen != 0 && h.buflen != ChunkSize {
		return false
	}
	if h.buflen == ChunkSize {
		h.push(guts.ChainingValue(guts.CompressChunk(h.buf[:], &guts.IV, h.start+h.done, 0)), 1)
		h.buflen = 0
	}
	h.flushPending()
	if n.chunks == 0 || n.at != h.start+h.done || h.done%n.chunks != 0 {
		return false
	}
	h.pending = &n
	return true
}

// last returns the node everything given so far joins into.
func (h *Hasher) last() guts.Node {
	var n guts.Node
	var chunks uint64
	if h.pending != nil {
		n, chunks = h.pending.n, h.pending.chunks
	} else {
		n, chunks = guts.CompressChunk(h.buf[:h.buflen], &guts.IV, h.start+h.done, 0), 1
	}
	for i := bits.TrailingZeros64(chunks); i < 64; i++ {
		if h.done&(1<<i) != 0 {
			n = guts.ParentNode(h.stack[i], guts.ChainingValue(n), &guts.IV, 0)
		}
	}
	return n
}

// Sum returns the BLAKE3 hash of everything given (a Hasher from New).
func (h *Hasher) Sum() [32]byte {
	n := h.last()
	n.Flags |= guts.FlagRoot
	out := guts.WordsToBytes(guts.CompressNode(n))
	return [32]byte(out[:32])
}

// CV returns the chaining value of the node everything given forms (for a
// Hasher from NewAt; see there).
func (h *Hasher) CV() CV { return wordsCV(guts.ChainingValue(h.last())) }

// Sum256 is the BLAKE3 hash of data, computed by up to workers goroutines
// in pieces of 1 MiB.
func Sum256(data []byte, workers int) [32]byte {
	const piece = 1 << 20
	full := len(data) / piece
	if full < 2 || workers < 2 {
		h := New()
		h.Write(data)
		return h.Sum()
	}
	nodes := make([]Node, full)
	var wg sync.WaitGroup
	next := make(chan int, full)
	for i := range full {
		next <- i
	}
	close(next)
	for range min(workers, full) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				nodes[i] = Subtree(data[i*piece:(i+1)*piece], uint64(i*piece/ChunkSize))
			}
		}()
	}
	wg.Wait()
	h := New()
	for _, n := range nodes {
		h.AddSubtree(n)
	}
	h.Write(data[full*piece:])
	return h.Sum()
}

// JoinCVs returns the BLAKE3 hash of an input from the chaining values of
// its pieces (NewAt(i·pieceChunks), each piece pieceChunks chunks long, a
// power of two, but the last, which may be shorter). With fewer than two
// pieces the root is a piece itself, whose chaining value cannot give the
// hash: it reports false.
func JoinCVs(cvs []CV, pieceChunks uint64) ([32]byte, bool) {
	if len(cvs) < 2 || bits.OnesCount64(pieceChunks) != 1 {
		return [32]byte{}, false
	}
	var stack [64][8]uint32
	var done uint64
	for _, cv := range cvs[:len(cvs)-1] {
		w := cvWords(cv)
		i := bits.TrailingZeros64(pieceChunks)
		for done&(1<<i) != 0 {
			w = guts.ChainingValue(guts.ParentNode(stack[i], w, &guts.IV, 0))
			i++
		}
		stack[i] = w
		done += pieceChunks
	}
	cur := cvWords(cvs[len(cvs)-1])
	var n guts.Node
	for i := bits.TrailingZeros64(pieceChunks); i < 64; i++ {
		if done&(1<<i) != 0 {
			n = guts.ParentNode(stack[i], cur, &guts.IV, 0)
			cur = guts.ChainingValue(n)
		}
	}
	n.Flags |= guts.FlagRoot
	out := guts.WordsToBytes(guts.CompressNode(n))
	return [32]byte(out[:32]), true
}
