package pack

import "bytes"

// StartsLikeArtifact reports whether prefix, the first bytes of a file (any
// number of them), agrees with the artifact magic as far as it goes. A file
// whose first bytes do not is no artifact at all, rather than a damaged one.
func StartsLikeArtifact(prefix []byte) bool {
	n := min(len(prefix), len(magic))
	return bytes.Equal(prefix[:n], magic[:n])
}
