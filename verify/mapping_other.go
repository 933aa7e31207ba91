//go:build !unix

package verify

import "ternkit/pack"

// mapArtifact maps nothing here: sections are read.
func mapArtifact(*pack.Artifact) []byte { return nil }

func unmapArtifact([]byte) {}
