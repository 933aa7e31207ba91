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

// blockedSumSince is the minor version that defines the sum order
// "blocked16".
const blockedSumSince = 4

// minorVersionFor is the lowest minor version whose features m uses.
func minorVersionFor(m *manifest.Manifest) uint16 {
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
	if m.Recipe.Sum == convert.SumBlocked16 && minor < blockedSumSince {
		return fmt.Errorf("%w: the recipe's sum order %s is a value of format 1.%d, the preamble says 1.%d", ErrVersion, m.Recipe.Sum, blockedSumSince, minor)
	}
	if len(m.Companions) > 0 && minor < companionsSince {
		return fmt.Errorf("%w: companion files are a feature of format 1.%d, the preamble says 1.%d", ErrVersion, companionsSince, minor)
	}
	if want := minorVersionFor(m); minor != want {
		return fmt.Errorf("%w: preamble says format 1.%d, the manifest uses features of 1.%d only", ErrStructure, minor, want)
	}
	return nil
}
