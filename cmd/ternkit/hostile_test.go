package main

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"strings"
	"testing"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// layoutArtifact lays out an artifact from pack/FORMAT.md alone: the good
// artifact's preamble with the given minor version, each tensor's payload
// at the next multiple of 64 (its entry's offset, length and BLAKE3 filled
// in), the manifest m, and a trailer locating and hashing it.
func layoutArtifact(good []byte, minor uint16, m *manifest.Manifest, payloads [][]byte) []byte {
	out := bytes.Clone(good[:pack.PreambleLen])
	binary.LittleEndian.PutUint16(out[10:], minor)
	pad := func() {
		for len(out)%pack.Align != 0 {
			out = append(out, 0)
		}
	}
	for i, p := range payloads {
		pad()
		sum := blake3.Sum256(p)
		m.Tensors[i].Section = manifest.Section{Offset: int64(len(out)), Length: int64(len(p)), BLAKE3: manifest.HexHash(sum)}
		out = append(out, p...)
	}
	m.ComputeTotals()
	body, err := manifest.Encode(m)
	if err != nil {
		panic(err)
	}
	return withManifest(good, out, body)
}

// withManifest ends the sections (preamble included) with body as the
// manifest, at the next multiple of 64, and a trailer for it, its magic
// copied from the good artifact's.
func withManifest(good, sections, body []byte) []byte {
	out := bytes.Clone(sections)
	for len(out)%pack.Align != 0 {
		out = append(out, 0)
	}
	tr := make([]byte, pack.TrailerLen)
	binary.LittleEndian.PutUint64(tr[0:], uint64(len(out)))
	binary.LittleEndian.PutUint64(tr[8:], uint64(len(body)))
	sum := blake3.Sum256(body)
	copy(tr[16:], sum[:])
	copy(tr[56:], good[len(good)-8:])
	return append(append(out, body...), tr...)
}

// goodManifest is the good artifact's manifest and where it starts.
func goodManifest(good []byte) (*manifest.Manifest, []byte, int64) {
	tr := good[len(good)-pack.TrailerLen:]
	off, n := binary.LittleEndian.Uint64(tr), binary.LittleEndian.Uint64(tr[8:])
	body := good[off : off+n]
	m, err := manifest.Decode(body)
	if err != nil {
		panic(err)
	}
	return m, body, int64(off)
}

// entropyClaims returns an artifact of count ternary tensors, rows × cols
// trits each, stored with the entropy codec in the frames frame(b) gives
// for a base3 payload of b bytes: a file whose size has nothing to do with
// what its manifest claims.
func entropyClaims(count int, rows, cols int64, frame func(b int64) []byte) func([]byte) map[string][]byte {
	return func(good []byte) map[string][]byte {
		m, _, _ := goodManifest(good)
		n := rows * cols
		tensorGran := convert.Granularity{Kind: convert.GranTensor}
		m.Tensors = nil
		var payloads [][]byte
		for i := range count {
			m.Tensors = append(m.Tensors, manifest.Tensor{
				Name: fmt.Sprintf("blocks.%d.mlp.up.weight", i), Shape: []int64{rows, cols}, SourceDType: "F32",
				Kind: manifest.KindTernary, Codec: manifest.CodecEntropy, Granularity: &tensorGran, Scale: 0.25,
				SourceSpan: strings.Repeat("ab", 32), Trits: &convert.TritCounts{Zero: n},
				Stats: &convert.Stats{ZeroFraction: 1, RelRMSE: 1},
			})
			payloads = append(payloads, frame((n+4)/5))
		}
		m.Policy = nil
		minor := max(binary.LittleEndian.Uint16(good[10:]), 1) // entropy needs 1.1
		return map[string][]byte{"": layoutArtifact(good, minor, m, payloads)}
	}
}

// emptyFrame is a 9-byte zstd frame (RFC 8878): magic, a single-segment
// descriptor with a 1-byte content size field, the size's low byte, and one
// empty last raw block; it claims b bytes and holds none.
func emptyFrame(b int64) []byte {
	return []byte{0x28, 0xb5, 0x2f, 0xfd, 0x20, byte(b), 0x01, 0x00, 0x00}
}

// rleFrame is the shortest zstd frame for b content bytes (RFC 8878): an
// 8-byte content size, then RLE blocks of up to 128 KiB of the byte v, 4
// bytes each.
func rleFrame(v byte) func(b int64) []byte {
	return func(b int64) []byte {
		f := binary.LittleEndian.AppendUint32(nil, 0xFD2FB528)
		f = append(f, 3<<6|1<<5)
		f = binary.LittleEndian.AppendUint64(f, uint64(b))
		for b > 0 {
			size := min(b, manifest.EntropyBlockMax)
			b -= size
			h := uint32(size)<<3 | 1<<1 // RLE
			if b == 0 {
				h |= 1 // Last_Block
			}
			f = append(f, byte(h), byte(h>>8), byte(h>>16), v)
		}
		return f
	}
}

// deepManifest returns the good artifact with a manifest whose "policy"
// begins with n nested arrays.
func deepManifest(n int) func([]byte) map[string][]byte {
	return func(good []byte) map[string][]byte {
		_, body, off := goodManifest(good)
		deep := strings.Repeat("[", n) + strings.Repeat("]", n)
		edited := bytes.Replace(body, []byte(`"policy":[`), []byte(`"policy":[`+deep+`,`), 1)
		return map[string][]byte{"": withManifest(good, good[:off], edited)}
	}
}

// hostileCases are artifacts that claim far more than they hold, or nest
// without end: each must be refused cheaply (peak memory is measured by
// hand; see the README's "Bounded memory").
func hostileCases() []malformedCase {
	return []malformedCase{
		{"artifact-entropy-claims.tkart", "4 entropy sections of 9 bytes claiming 167,772,160 trits each (671M in all)", exitFailed,
			"codec entropy takes 1030 to", entropyClaims(4, 16384, 10240, emptyFrame)},
		{"artifact-entropy-2e40.tkart", "one 9-byte entropy frame claiming 2^40 trits", exitFailed,
			"codec entropy takes 6710894 to", entropyClaims(1, 1<<20, 1<<20, emptyFrame)},
		{"artifact-entropy-rle.tkart", "4 entropy frames of RLE blocks, each as short as RFC 8878 allows for its content, claiming 671M trits in all; the content byte 243 is no base3 byte", exitFailed,
			"byte 0 of the base3 payload is 0xf3", entropyClaims(4, 16384, 10240, rleFrame(243))},
		{"artifact-deep-json.tkart", "a manifest nesting 22,000 arrays (44 KB)", exitFailed, "nested more than 64 levels deep", deepManifest(22_000)},
	}
}

func TestHostileCasesBuild(t *testing.T) {
	good := goodArtifact(t)
	for _, c := range hostileCases() {
		b := c.files(good)[""]
		if len(b) > 64<<10 {
			t.Errorf("%s is %d bytes; the corpus holds small files", c.name, len(b))
		}
	}
}
