// Package pack writes and reads ternkit artifacts, the container specified
// in pack/FORMAT.md: a preamble, 64-byte-aligned sections holding packed
// trits or kept tensor bytes, a JSON manifest and a trailer that locates and
// hashes the manifest.
package pack

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
)

// Layout constants (pack/FORMAT.md).
const (
	Align       = 64
	PreambleLen = 64
	TrailerLen  = 64
	// Extension is the artifact file extension.
	Extension = ".tkart"
	// DefaultMaxManifest is the default limit on the manifest length.
	DefaultMaxManifest = 256 << 20

	majorVersion = 1
	minorVersion = 4 // the highest minor version this package reads (manifest.MinorWritten)
)

var (
	magic        = [8]byte{'T', 'K', 'A', 'R', 'T', 0, '\r', '\n'}
	trailerMagic = [8]byte{'T', 'K', 'E', 'N', 'D', 0, '\r', '\n'}
)

// Sentinel errors for outcomes callers branch on. Typically all but
// ErrNoTensor indicate a corrupted or foreign file.
var (
	ErrNotArtifact = errors.New("not a ternkit artifact")
	ErrVersion     = errors.New("unsupported artifact version")
	ErrStructure   = errors.New("malformed artifact")
	ErrHash        = errors.New("hash mismatch")
	ErrNoTensor    = errors.New("no such tensor")
)

// FormatError locates a problem in an artifact.
type FormatError struct {
	File   string // path, or "" for a reader without one
	Where  string // "preamble", "trailer", "manifest", "section \"name\"", "padding"
	Offset int64  // absolute byte offset, -1 if none
	Err    error
}

func (e *FormatError) Error() string {
	var b bytes.Buffer
	if e.File != "" {
		b.WriteString(e.File)
		b.WriteString(": ")
	}
	b.WriteString(e.Where)
	if e.Offset >= 0 {
		fmt.Fprintf(&b, ": byte %d", e.Offset)
	}
	b.WriteString(": ")
	b.WriteString(e.Err.Error())
	return b.String()
}

func (e *FormatError) Unwrap() error { return e.Err }

func alignUp(n int64) int64 { return (n + Align - 1) &^ (Align - 1) }

func encodePreamble(minor uint16) []byte {
	p := make([]byte, PreambleLen)
	copy(p, magic[:])
	binary.LittleEndian.PutUint16(p[8:], majorVersion)
	binary.LittleEndian.PutUint16(p[10:], minor)
	return p
}

// preambleMinor is the minor version of a checked preamble.
func preambleMinor(p []byte) uint16 { return binary.LittleEndian.Uint16(p[10:]) }

// checkPreamble returns the offset and error of the first bad preamble byte.
func checkPreamble(p []byte) (int64, error) {
	if !bytes.Equal(p[:8], magic[:]) {
		return 0, fmt.Errorf("%w: magic % x", ErrNotArtifact, p[:8])
	}
	if v := binary.LittleEndian.Uint16(p[8:]); v != majorVersion {
		return 8, fmt.Errorf("%w: major version %d (this reader knows %d)", ErrVersion, v, majorVersion)
	}
	if v := binary.LittleEndian.Uint16(p[10:]); v > minorVersion {
		return 10, fmt.Errorf("%w: minor version %d (this reader knows up to %d)", ErrVersion, v, minorVersion)
	}
	if f := binary.LittleEndian.Uint32(p[12:]); f != 0 {
		return 12, fmt.Errorf("%w: flags 0x%08x (none defined)", ErrStructure, f)
	}
	if i := firstNonZero(p[16:]); i >= 0 {
		return int64(16 + i), fmt.Errorf("%w: reserved preamble byte is 0x%02x", ErrStructure, p[16+i])
	}
	return -1, nil
}

type trailer struct {
	manifestOffset int64
	manifestLen    int64
	manifestHash   [32]byte
}

func (t trailer) encode() []byte {
	p := make([]byte, TrailerLen)
	binary.LittleEndian.PutUint64(p[0:], uint64(t.manifestOffset))
	binary.LittleEndian.PutUint64(p[8:], uint64(t.manifestLen))
	copy(p[16:48], t.manifestHash[:])
	copy(p[56:], trailerMagic[:])
	return p
}

// decodeTrailer checks the trailer p of a file of the given size; the
// returned offset is relative to the trailer.
func decodeTrailer(p []byte, size, maxManifest int64) (trailer, int64, error) {
	var t trailer
	if !bytes.Equal(p[56:], trailerMagic[:]) {
		return t, 56, fmt.Errorf("%w: trailer magic % x", ErrStructure, p[56:])
	}
	if i := firstNonZero(p[48:56]); i >= 0 {
		return t, int64(48 + i), fmt.Errorf("%w: reserved trailer byte is 0x%02x", ErrStructure, p[48+i])
	}
	off := binary.LittleEndian.Uint64(p[0:])
	n := binary.LittleEndian.Uint64(p[8:])
	end := uint64(size - TrailerLen)
	switch {
	case off < PreambleLen || off%Align != 0 || off > end:
		return t, 0, fmt.Errorf("%w: manifest offset %d (file of %d bytes)", ErrStructure, off, size)
	case n != end-off:
		return t, 8, fmt.Errorf("%w: manifest length %d does not reach the trailer (want %d)", ErrStructure, n, end-off)
	case n > uint64(maxManifest):
		return t, 8, fmt.Errorf("%w: manifest length %d over the limit %d", ErrStructure, n, maxManifest)
	}
	t.manifestOffset, t.manifestLen = int64(off), int64(n)
	copy(t.manifestHash[:], p[16:48])
	return t, -1, nil
}

func firstNonZero(b []byte) int {
	for i, c := range b {
		if c != 0 {
			return i
		}
	}
	return -1
}
