package convert

import (
	"encoding/binary"

	"github.com/zeebo/blake3"

	"ternkit/internal/treehash"
)

// SpanSegment is the stride of the file offsets at which a tensor's bytes
// are cut into segments for its source span identity (format 1.4,
// pack/FORMAT.md, "source_span"): each segment is hashed apart, so that
// one large tensor is hashed by every worker.
const SpanSegment = 4 << 20

// spanTag opens every source span identity's input.
const spanTag = "ternkit source span 1"

// A SourceID is what a walk learns of a tensor's bytes in its file: its
// source span identity (format 1.4), which depends on the bytes and on
// their place in the file.
type SourceID struct {
	Span [32]byte
	// Plain is the BLAKE3 of the bytes alone, when WalkOptions.Plain
	// asked for it; nil otherwise.
	Plain *[32]byte
}

// segment is the file bytes [s, e) of one piece of a tensor, cut at the
// file offsets that are multiples of SpanSegment.
type segment struct{ s, e int64 }

// segments cuts the file bytes [a, b) at the multiples of SpanSegment;
// none for an empty range.
func segments(a, b int64) []segment {
	var out []segment
	for s := a; s < b; {
		e := min(b, (s/SpanSegment+1)*SpanSegment)
		out = append(out, segment{s, e})
		s = e
	}
	return out
}

// segmentHash is one segment's part of the BLAKE3 tree of its file: the
// bytes before its first chunk boundary (head), the complete subtrees over
// its whole chunks, and the bytes after its last chunk boundary (tail).
// Head and tail are copies, shorter than a chunk.
type segmentHash struct {
	head, tail []byte
	nodes      []treehash.Node
}

// hashSegment hashes data, the file bytes from offset s on, one segment
// (or, with s taken from a tensor's first byte, a piece of that tensor's
// own tree).
func hashSegment(data []byte, s int64) segmentHash {
	const chunk = treehash.ChunkSize
	e := s + int64(len(data))
	c0 := (s + chunk - 1) / chunk * chunk // the first chunk boundary at or after s
	if c0 >= e {
		return segmentHash{head: append([]byte(nil), data...)}
	}
	c1 := e / chunk * chunk
	g := segmentHash{head: append([]byte(nil), data[:c0-s]...), tail: append([]byte(nil), data[c1-s:]...)}
	at := c0 / chunk
	body := data[c0-s : c1-s]
	for _, n := range treehash.Spans(uint64(at), uint64((c1-c0)/chunk)) {
		size := int(n) * chunk
		g.nodes = append(g.nodes, treehash.Subtree(body[:size], uint64(at)))
		body = body[size:]
		at += int64(n)
	}
	return g
}

// feed gives the segment to the file's hasher, in file order.
func (g *segmentHash) feed(h *treehash.Hasher) {
	h.Write(g.head)
	for _, n := range g.nodes {
		if !h.AddSubtree(n) {
			panic("convert: a segment's subtree does not fit the file's hash")
		}
	}
	h.Write(g.tail)
}

// spanHasher builds a tensor's source span identity from its segments.
type spanHasher struct{ h *blake3.Hasher }

func newSpanHasher(a, b int64) spanHasher {
	h := blake3.New()
	h.Write([]byte(spanTag))
	var n [16]byte
	binary.LittleEndian.PutUint64(n[:8], uint64(a))
	binary.LittleEndian.PutUint64(n[8:], uint64(b))
	h.Write(n[:])
	return spanHasher{h}
}

func (s spanHasher) add(g *segmentHash) {
	s.h.Write(g.head)
	for _, n := range g.nodes {
		cv := n.CV()
		s.h.Write(cv[:])
	}
	s.h.Write(g.tail)
}

func (s spanHasher) sum() [32]byte { return [32]byte(s.h.Sum(nil)) }

// SpanIdentity is the source span identity (format 1.4) of the tensor at
// the bytes [a, b) of the file whose bytes are file: BLAKE3 of
// "ternkit source span 1", a and b as little-endian uint64, then for each
// segment of [a, b) cut at the multiples of SpanSegment its head bytes,
// the chaining values of the complete subtrees of the file's BLAKE3 tree
// over its whole chunks, and its tail bytes. The walks compute it in
// parallel; this is the plain, one-goroutine form.
func SpanIdentity(file []byte, a, b int64) [32]byte {
	h := newSpanHasher(a, b)
	for _, g := range segments(a, b) {
		sh := hashSegment(file[g.s:g.e], g.s)
		h.add(&sh)
	}
	return h.sum()
}
