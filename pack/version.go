package pack

import (
	"fmt"

	"ternkit/convert"
	"ternkit/manifest"
)

// codecSince is the minor version of format 1 that defines each stored
// codec (pack/FORMAT.md, "Versioning").
var codecSince = map[string]uint16{
	manifest.CodecRaw:     0,
	manifest.CodecBits2:   0,
	manifest.CodecBase3:   0,
	manifest.CodecEntropy: 1,
}

// sumKeySince is the minor version that defines the recipe's "sum" key.
const sumKeySince = 2

// companionsSince is the minor version that defines the manifest's
// "companions" key and companion sections.
const companionsSince = 3

// sourceSpanSince is the minor version that may record a tensor's source
// by its source span identity ("source_span") instead of "source_blake3";
// the writer does, for every tensor.
const sourceSpanSince = 4

// blockedSumSince is the minor version that defines the sum order
// "blocked16".
const blockedSumSince = 4

// pieceCVsSince is the minor version that defines sections' "piece_cvs"
// (in place of "chunks") and the manifest's "minor" key, which every file
// of that version on records: writers always write it.
const pieceCVsSince = manifest.MinorWritten

// minorVersionFor is the minor version of a file with manifest m: the one
// its "minor" key records (1.4 on), else the lowest one whose features it
// uses (1.0 to 1.3).
func minorVersionFor(m *manifest.Manifest) uint16 {
	if m.Minor != nil {
		return uint16(*m.Minor)
	}
	var v uint16
	if m.Recipe.Sum != "" {
		v = sumKeySince
	}
	if m.Recipe.Sum == convert.SumBlocked16 {
		v = blockedSumSince
	}
	if len(m.Companions) > 0 {
		v = max(v, companionsSince)
	}
	for _, e := range m.Tensors {
		v = max(v, codecSince[e.Codec])
		if e.SourceSpan != "" {
			v = max(v, sourceSpanSince)
		}
	}
	return v
}

// checkMinorVersion requires the preamble's minor version to be exactly
// the lowest one whose features m uses, so that the byte is fixed by a rule.
func checkMinorVersion(m *manifest.Manifest, minor uint16) error {
	for _, e := range m.Tensors {
		if since := codecSince[e.Codec]; since > minor {
			return fmt.Errorf("%w: tensor %q uses codec %s of format 1.%d, the preamble says 1.%d", ErrVersion, e.Name, e.Codec, since, minor)
		}
	}
	if m.Recipe.Sum != "" && minor < sumKeySince {
		return fmt.Errorf("%w: the recipe's sum order is a key of format 1.%d, the preamble says 1.%d", ErrVersion, sumKeySince, minor)
	}
	spans, plains := 0, 0
	for _, e := range m.Tensors {
		if e.SourceBLAKE3 != "" {
			plains++
		}
		if e.SourceSpan != "" {
			spans++
			if minor < sourceSpanSince {
				return fmt.Errorf("%w: tensor %q records source_span, a key of format 1.%d, the preamble says 1.%d", ErrVersion, e.Name, sourceSpanSince, minor)
			}
		}
	}
	if spans > 0 && plains > 0 {
		return fmt.Errorf("%w: %d tensors record source_span, %d source_blake3 (one kind for all)", manifest.ErrInvalid, spans, plains)
	}
	if m.Recipe.Sum == convert.SumBlocked16 && minor < blockedSumSince {
		return fmt.Errorf("%w: the recipe's sum order %s is a value of format 1.%d, the preamble says 1.%d", ErrVersion, m.Recipe.Sum, blockedSumSince, minor)
	}
	if len(m.Companions) > 0 && minor < companionsSince {
		return fmt.Errorf("%w: companion files are a feature of format 1.%d, the preamble says 1.%d", ErrVersion, companionsSince, minor)
	}
	pieces, chunks := pieceRecords(m)
	if m.Minor != nil && minor < pieceCVsSince {
		return fmt.Errorf("%w: the manifest's minor key is a key of format 1.%d, the preamble says 1.%d", ErrVersion, pieceCVsSince, minor)
	}
	if pieces && minor < pieceCVsSince {
		return fmt.Errorf("%w: piece chaining values (piece_cvs) are a key of format 1.%d, the preamble says 1.%d", ErrVersion, pieceCVsSince, minor)
	}
	if minor >= pieceCVsSince {
		if m.Minor == nil || *m.Minor != int(minor) {
			return fmt.Errorf("%w: the preamble says format 1.%d, the manifest has no minor key equal to it (required from 1.%d on)", manifest.ErrInvalid, minor, pieceCVsSince)
		}
		if chunks {
			return fmt.Errorf("%w: chunk hashes (chunks) in a file of format 1.%d, which records piece_cvs instead", manifest.ErrInvalid, minor)
		}
		return nil
	}
	if want := minorVersionFor(m); minor != want {
		return fmt.Errorf("%w: preamble says format 1.%d, the manifest uses features of 1.%d only", ErrStructure, minor, want)
	}
	return nil
}

// pieceRecords reports whether any section of m records piece chaining
// values, and whether any records chunk hashes.
func pieceRecords(m *manifest.Manifest) (pieces, chunks bool) {
	see := func(s manifest.Section) {
		pieces = pieces || len(s.PieceCVs) > 0
		chunks = chunks || len(s.Chunks) > 0
	}
	for i := range m.Tensors {
		for _, s := range m.Tensors[i].Sections() {
			see(s)
		}
	}
	for _, c := range m.Companions {
		see(c.Section)
	}
	return pieces, chunks
}
