package pack

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"ternkit/convert"
	"ternkit/internal/atomicfile"
	"ternkit/manifest"
)

// Names of the weights UnpackDir writes (the common checkpoint layout:
// model.safetensors, or model-0000i-of-0000n.safetensors shards and their
// index model.safetensors.index.json; common practice).
const (
	UnpackedWeights = "model.safetensors"
	UnpackedIndex   = "model.safetensors.index.json"
)

// ErrDirNotEmpty reports an UnpackDir destination that already holds files.
var ErrDirNotEmpty = errors.New("destination directory is not empty")

// UnpackDir writes a complete checkpoint directory at dir: the weights as
// Unpack writes them, in one file, or, when shardSize > 0, in shards of at
// most shardSize tensor bytes each (a larger tensor gets a shard of its
// own) with their index; and every companion file, byte for byte, under
// its name. dir must not exist or be empty; everything is written into a
// temporary directory beside it, which is renamed to dir at the end, so
// that on error nothing is left at dir.
func UnpackDir(a *Artifact, dir, dtype string, shardSize int64) error {
	if dtype != SourceDType && !slices.Contains(UnpackDTypes, dtype) {
		return fmt.Errorf("%w: unpack to %q (valid: %v)", convert.ErrDType, dtype, UnpackDTypes)
	}
	if shardSize < 0 {
		return fmt.Errorf("shard size %d is negative", shardSize)
	}
	if entries, err := os.ReadDir(dir); err == nil && len(entries) > 0 {
		return fmt.Errorf("%w: %s", ErrDirNotEmpty, dir)
	} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	shards := planShards(a.Manifest().Tensors, dtype, shardSize)
	weights := map[string]bool{}
	if len(shards) <= 1 {
		weights[UnpackedWeights] = true
	} else {
		weights[UnpackedIndex] = true
		for i := range shards {
			weights[shardName(i, len(shards))] = true
		}
	}
	for _, c := range a.Companions() {
		// ASCII case ignored, as the companion name rules do: on a file
		// system that ignores case the companion would replace the weights
		lower := strings.ToLower(c.Name)
		if weights[lower] {
			return fmt.Errorf("%w: companion %q has the name of the unpacked weights", ErrCompanion, c.Name)
		}
		// a second weights file or index would make the directory
		// ambiguous to a loader, which reads its one index or weights file
		if strings.HasSuffix(lower, ".safetensors") || strings.HasSuffix(lower, ".safetensors.index.json") {
			return fmt.Errorf("%w: companion %q would be read as weights in the unpacked directory (unpack -o FILE.safetensors writes the weights alone)", ErrCompanion, c.Name)
		}
	}
	clean := filepath.Clean(dir)
	// a new directory is built beside its place and renamed into it; an
	// existing empty one (perhaps a mount point, a link, the working
	// directory) is kept, and the files are built in a temporary directory
	// inside it, then moved out of it
	_, statErr := os.Stat(clean)
	exists := statErr == nil
	var tmp string
	var err error
	if exists {
		tmp, err = os.MkdirTemp(clean, ".unpack.tmp-")
	} else {
		tmp, err = os.MkdirTemp(filepath.Dir(clean), "."+filepath.Base(clean)+".tmp-")
	}
	if err != nil {
		return err
	}
	done := false
	defer func() {
		if !done {
			os.RemoveAll(tmp)
		}
	}()
	if len(shards) <= 1 {
		if err := unpackTensors(a, filepath.Join(tmp, UnpackedWeights), dtype, a.Manifest().Tensors); err != nil {
			return err
		}
	} else if err := unpackShards(a, tmp, dtype, shards); err != nil {
		return err
	}
	for _, c := range a.Companions() {
		b, err := a.Companion(c.Name)
		if err != nil {
			return err
		}
		if err := atomicfile.WriteFile(filepath.Join(tmp, c.Name), b, 0o644); err != nil {
			return err
		}
	}
	if exists {
		if err := moveOut(tmp, clean, weights); err != nil {
			return err
		}
		done = true
		os.Remove(tmp)
		return syncDir(clean)
	}
	if err := os.Chmod(tmp, 0o755); err != nil {
		return err
	}
	if err := os.Rename(tmp, clean); err != nil {
		return err
	}
	done = true
	return syncDir(filepath.Dir(clean))
}

// moveOut moves every file of tmp into dir, the weights last, so that the
// weights appear when everything else is there. A name already taken in
// dir (a file that appeared since dir was found empty) stops it; on error
// the files moved so far are removed again.
func moveOut(tmp, dir string, weights map[string]bool) error {
	entries, err := os.ReadDir(tmp)
	if err != nil {
		return err
	}
	names := make([]string, 0, len(entries))
	for _, e := range entries {
		names = append(names, e.Name())
	}
	slices.SortStableFunc(names, func(a, b string) int {
		switch {
		case weights[a] == weights[b]:
			return 0
		case weights[a]:
			return 1
		}
		return -1
	})
	var moved []string
	for _, name := range names {
		to := filepath.Join(dir, name)
		err := fmt.Errorf("%w: %s appeared while unpacking", ErrDirNotEmpty, to)
		if _, lerr := os.Lstat(to); errors.Is(lerr, fs.ErrNotExist) {
			err = os.Rename(filepath.Join(tmp, name), to)
		}
		if err != nil {
			for _, m := range moved {
				os.Remove(m)
			}
			return err
		}
		moved = append(moved, to)
	}
	return nil
}

// planShards splits the tensors, in order, into runs of at most shardSize
// unpacked bytes (one run when shardSize is 0).
func planShards(tensors []manifest.Tensor, dtype string, shardSize int64) [][]manifest.Tensor {
	if shardSize == 0 || len(tensors) == 0 {
		return [][]manifest.Tensor{tensors}
	}
	var out [][]manifest.Tensor
	var cur []manifest.Tensor
	var size int64
	for _, e := range tensors {
		n := unpackedBytes(e, dtype)
		if len(cur) > 0 && size+n > shardSize {
			out = append(out, cur)
			cur, size = nil, 0
		}
		cur = append(cur, e)
		size += n
	}
	return append(out, cur)
}

// unpackedBytes is the size of the tensor's data in the unpacked file.
func unpackedBytes(e manifest.Tensor, dtype string) int64 {
	size, ok := convert.DTypeSize(unpackedDType(e, dtype))
	if !ok {
		return e.Section.Length // an unknown dtype, kept byte for byte
	}
	return manifest.NumElements(e.Shape) * int64(size)
}

func shardName(i, n int) string {
	return fmt.Sprintf("model-%05d-of-%05d.safetensors", i+1, n)
}

// unpackShards writes each run of tensors to its shard and the index
// naming each tensor's shard.
func unpackShards(a *Artifact, dir, dtype string, shards [][]manifest.Tensor) error {
	type index struct {
		Metadata  map[string]int64  `json:"metadata"`
		WeightMap map[string]string `json:"weight_map"`
	}
	idx := index{Metadata: map[string]int64{"total_size": 0}, WeightMap: map[string]string{}}
	for i, run := range shards {
		name := shardName(i, len(shards))
		if err := unpackTensors(a, filepath.Join(dir, name), dtype, run); err != nil {
			return err
		}
		for _, e := range run {
			idx.WeightMap[e.Name] = name
			idx.Metadata["total_size"] += unpackedBytes(e, dtype)
		}
	}
	b, err := json.MarshalIndent(idx, "", "  ")
	if err != nil {
		return err
	}
	return atomicfile.WriteFile(filepath.Join(dir, UnpackedIndex), append(b, '\n'), 0o644)
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	if err := d.Sync(); err != nil && !errors.Is(err, os.ErrInvalid) {
		return err
	}
	return nil
}
