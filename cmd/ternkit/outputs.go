package main

import (
	"io"
	"os"
	"path/filepath"

	"github.com/zeebo/blake3"

	"ternkit/internal/atomicfile"
	"ternkit/internal/inputfile"
	"ternkit/manifest"
)

// checkOutput refuses -o OUT when OUT exists and is not a regular file, or
// is one of the command's inputs (symbolic links followed): the command
// would destroy what it reads. It runs before anything is written.
func checkOutput(out string, inputs ...string) error {
	if err := atomicfile.CheckOutput(out, inputs...); err != nil {
		return usageError{err}
	}
	return nil
}

// checkNotRecordedSource refuses an output that holds one of the source
// files the manifest records (same base name, size and BLAKE3): unpacking
// over the checkpoint an artifact came from would destroy the original.
func checkNotRecordedSource(out string, m *manifest.Manifest) error {
	fi, err := os.Stat(out)
	if err != nil || !fi.Mode().IsRegular() {
		return nil
	}
	for _, f := range m.Source.Files {
		if f.Name != filepath.Base(out) || f.Bytes != fi.Size() {
			continue
		}
		in, err := inputfile.Open(out)
		if err != nil {
			return nil
		}
		h := blake3.New()
		_, err = io.Copy(h, in)
		in.Close()
		if err == nil && manifest.HexHash([32]byte(h.Sum(nil))) == f.BLAKE3 {
			return usagef("write %s: it is the source checkpoint this artifact was packed from (size and BLAKE3 as recorded); unpack to another name", out)
		}
	}
	return nil
}
