package pack

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"sync"

	"github.com/klauspost/compress/zstd"

	"ternkit/manifest"
)

// The entropy codec stores the base3 payload of a tensor as one zstd frame
// (RFC 8878) under the rules of pack/FORMAT.md, "entropy": single segment,
// content size present and equal to the base3 length, no dictionary, no
// checksum, nothing after the frame.

const (
	zstdMagic        = 0xFD2FB528
	zstdFHDSingle    = 1 << 5 // Single_Segment_flag
	zstdFHDMustClear = 0x1F   // unused, reserved, checksum and dictionary bits
	zstdBlockRaw     = 0
	zstdBlockRLE     = 1
	zstdBlockReserve = 3
)

var (
	entropyEncoder = sync.OnceValue(func() *zstd.Encoder {
		e, err := zstd.NewWriter(nil,
			zstd.WithEncoderLevel(zstd.SpeedDefault),
			zstd.WithEncoderCRC(false),
			zstd.WithSingleSegment(true),
			zstd.WithZeroFrames(true),
			zstd.WithAllLitEntropyCompression(true), // Huffman-code blocks that are all literals
			zstd.WithEncoderConcurrency(1))
		if err != nil {
			panic("pack: entropy encoder: " + err.Error())
		}
		return e
	})
	entropyDecoder = sync.OnceValue(func() *zstd.Decoder {
		d, err := zstd.NewReader(nil,
			zstd.WithDecodeAllCapLimit(true), // never grow past the buffer sized from the tensor
			zstd.WithDecoderMaxWindow(1<<41))
		if err != nil {
			panic("pack: entropy decoder: " + err.Error())
		}
		return d
	})
)

// encodeEntropy appends the entropy frame of trits to dst.
func encodeEntropy(dst []byte, trits []int8) []byte {
	return appendEntropyFrame(dst, encodeBase3(nil, trits))
}

// appendEntropyFrame appends a frame holding content to dst. Should the
// encoder ever write a frame outside the format's rules or bounds, it
// falls back to stored blocks, which always meet them.
func appendEntropyFrame(dst, content []byte) []byte {
	frame := entropyEncoder().EncodeAll(content, nil)
	_, hi, _ := manifest.TritPayloadRange(manifest.CodecEntropy, 5*int64(len(content)))
	if int64(len(frame)) > hi || checkEntropyFrame(frame, len(content)) != nil {
		return appendStoredFrame(dst, content)
	}
	return append(dst, frame...)
}

// appendStoredFrame appends a frame holding content in raw blocks.
func appendStoredFrame(dst, content []byte) []byte {
	var head [4 + 1 + 8]byte
	binary.LittleEndian.PutUint32(head[:], zstdMagic)
	n := uint64(len(content))
	var fcs int
	switch {
	case n < 256:
		head[4], fcs = zstdFHDSingle, 1
		head[5] = byte(n)
	case n < 256+65536:
		head[4], fcs = 1<<6|zstdFHDSingle, 2
		binary.LittleEndian.PutUint16(head[5:], uint16(n-256))
	case n < 1<<32:
		head[4], fcs = 2<<6|zstdFHDSingle, 4
		binary.LittleEndian.PutUint32(head[5:], uint32(n))
	default:
		head[4], fcs = 3<<6|zstdFHDSingle, 8
		binary.LittleEndian.PutUint64(head[5:], n)
	}
	dst = append(dst, head[:5+fcs]...)
	for first := true; first || len(content) > 0; first = false {
		size := min(len(content), manifest.EntropyBlockMax)
		h := uint32(size)<<3 | zstdBlockRaw<<1
		if size == len(content) {
			h |= 1 // Last_Block
		}
		dst = append(dst, byte(h), byte(h>>8), byte(h>>16))
		dst = append(dst, content[:size]...)
		content = content[size:]
	}
	return dst
}

// errEntropyFrame is wrapped with ErrInvalidCode for frames outside the rules.
var errEntropyFrame = errors.New("entropy frame")

// checkEntropyFrame checks the frame header and walks the block headers of
// p against the rules of pack/FORMAT.md, for a tensor whose base3 payload
// is want bytes. It allocates nothing.
func checkEntropyFrame(p []byte, want int) error {
	bad := func(off int, format string, args ...any) error {
		return fmt.Errorf("%w: %w: byte %d: %s", ErrInvalidCode, errEntropyFrame, off, fmt.Sprintf(format, args...))
	}
	if len(p) < manifest.EntropyMinLen {
		return bad(0, "%d bytes is shorter than the smallest frame (%d)", len(p), manifest.EntropyMinLen)
	}
	if m := binary.LittleEndian.Uint32(p); m != zstdMagic {
		return bad(0, "magic 0x%08x (want 0x%08x)", m, zstdMagic)
	}
	fhd := p[4]
	if fhd&zstdFHDSingle == 0 || fhd&zstdFHDMustClear != 0 {
		return bad(4, "frame header descriptor 0x%02x (want single segment; no checksum, dictionary or reserved bits)", fhd)
	}
	var size uint64
	off := 5
	switch fhd >> 6 {
	case 0:
		size, off = uint64(p[5]), 6
	case 1:
		size, off = uint64(binary.LittleEndian.Uint16(p[5:]))+256, 7
	case 2:
		if len(p) < 9+3 {
			return bad(len(p), "frame truncated in its header")
		}
		size, off = uint64(binary.LittleEndian.Uint32(p[5:])), 9
	case 3:
		if len(p) < 13+3 {
			return bad(len(p), "frame truncated in its header")
		}
		size, off = binary.LittleEndian.Uint64(p[5:]), 13
	}
	if size != uint64(want) {
		return bad(5, "frame content size %d, the tensor's base3 payload is %d bytes", size, want)
	}
	var stored uint64 // content of raw and RLE blocks, known before decoding
	for {
		if len(p)-off < 3 {
			return bad(len(p), "frame truncated: block header needs 3 bytes")
		}
		h := uint32(p[off]) | uint32(p[off+1])<<8 | uint32(p[off+2])<<16
		last, typ, bsize := h&1 == 1, (h>>1)&3, int(h>>3)
		if typ == zstdBlockReserve {
			return bad(off, "reserved block type 3")
		}
		if bsize > manifest.EntropyBlockMax {
			return bad(off, "block size %d over the maximum %d", bsize, manifest.EntropyBlockMax)
		}
		body := bsize
		switch typ {
		case zstdBlockRLE:
			body = 1
			fallthrough
		case zstdBlockRaw:
			if stored += uint64(bsize); stored > size {
				return bad(off, "blocks hold more than the frame content size %d", size)
			}
		}
		off += 3
		if len(p)-off < body {
			return bad(len(p), "frame truncated: block at byte %d needs %d bytes", off-3, body)
		}
		off += body
		if last {
			break
		}
	}
	if off != len(p) {
		return bad(off, "%d bytes after the frame", len(p)-off)
	}
	return nil
}

// decodeEntropy checks the frame, then decodes it into a buffer of exactly
// the base3 length (allocated only after the check) and decodes that.
func decodeEntropy(dst []int8, payload []byte) error {
	content, err := decodeEntropyContent(payload, (int64(len(dst))+4)/5)
	if err != nil {
		return err
	}
	if err := decodeBase3(dst, content); err != nil {
		return fmt.Errorf("entropy frame content: %w", err)
	}
	return nil
}

// decodeEntropyContent checks the frame against a base3 payload of want
// bytes, the bound of its length included, and only then decodes it into a
// buffer of exactly want bytes.
func decodeEntropyContent(payload []byte, want int64) ([]byte, error) {
	if want > math.MaxInt {
		return nil, fmt.Errorf("%w: %w: content of %d bytes is past this reader's limit", ErrInvalidCode, errEntropyFrame, want)
	}
	if err := checkEntropyFrame(payload, int(want)); err != nil {
		return nil, err
	}
	if lo, _, _ := manifest.TritPayloadRange(manifest.CodecEntropy, 5*want); int64(len(payload)) < lo {
		return nil, fmt.Errorf("%w: %w: a frame of %d bytes cannot hold %d bytes of content (it takes at least %d)", ErrInvalidCode, errEntropyFrame, len(payload), want, lo)
	}
	content, err := entropyDecoder().DecodeAll(payload, make([]byte, 0, want))
	if err != nil {
		return nil, fmt.Errorf("%w: %w: %v", ErrInvalidCode, errEntropyFrame, err)
	}
	if int64(len(content)) != want {
		return nil, fmt.Errorf("%w: %w: decodes to %d bytes, want %d", ErrInvalidCode, errEntropyFrame, len(content), want)
	}
	return content, nil
}
