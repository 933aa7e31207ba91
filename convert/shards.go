package convert

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"syscall"

	"ternkit/internal/inputfile"
)

// ErrIndex reports a sharded set that cannot be read as one model: a bad
// index file, a shard that is missing or lies outside the index's
// directory, a tensor held by two shards, or a weight_map that disagrees
// with the shards. A missing shard also wraps fs.ErrNotExist.
var ErrIndex = errors.New("invalid sharded set")

// IndexSuffix ends the name of a sharded set's index file, as in
// model.safetensors.index.json (common practice).
const IndexSuffix = ".safetensors.index.json"

// Open opens a checkpoint and validates every header; it reads no tensor
// data. path may be
//
//   - a safetensors file;
//   - a sharded set's index, a file whose name ends in ".json" holding a
//     "weight_map" from tensor name to shard file name;
//   - a directory holding exactly one index (a name ending in IndexSuffix)
//     or, without an index, exactly one ".safetensors" file.
//
// A sharded set is read as one model: every shard the weight_map names is
// opened inside the index's directory (absolute names, ".." and symbolic
// links leading out are refused), names are unique across shards, and the
// weight_map lists every tensor of every shard, in the shard that holds it.
// An index "metadata.total_size" that differs from the shards' tensor bytes
// is a warning (Source.Warnings), not an error. Every error is an
// *InputError naming the file, and the tensor and byte offset where known.
// Open applies DefaultLimits.
func Open(path string) (*Source, error) { return OpenLimited(path, Limits{}) }

// OpenLimited is Open with limits for untrusted input; zero fields of lim
// take their defaults. A file over a limit gives an *InputError wrapping
// ErrHeader (ErrIndex for an index).
func OpenLimited(path string, lim Limits) (*Source, error) {
	lim = lim.withDefaults()
	fi, err := os.Stat(path)
	if err != nil {
		return nil, openError(path, err)
	}
	if fi.IsDir() {
		if path, err = resolveDir(path); err != nil {
			return nil, err
		}
	}
	if strings.HasSuffix(path, ".json") {
		return openIndex(path, lim)
	}
	return openSingle(path, lim)
}

// resolveDir finds the checkpoint in dir: its one index, else its one
// safetensors file.
func resolveDir(dir string) (string, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return "", openError(dir, err)
	}
	var indexes, files []string
	for _, e := range entries {
		switch name := e.Name(); {
		case e.IsDir():
		case strings.HasSuffix(name, IndexSuffix):
			indexes = append(indexes, name)
		case strings.HasSuffix(name, ".safetensors"):
			files = append(files, name)
		}
	}
	switch {
	case len(indexes) == 1:
		return filepath.Join(dir, indexes[0]), nil
	case len(indexes) > 1:
		return "", inputError(dir, "", -1, ErrIndex, "directory holds %d index files (%s); give the one to read", len(indexes), strings.Join(indexes, ", "))
	case len(files) == 1:
		return filepath.Join(dir, files[0]), nil
	case len(files) > 1:
		return "", inputError(dir, "", -1, ErrIndex, "directory holds %d .safetensors files and no *%s; give one file, or the index of the set", len(files), IndexSuffix)
	}
	return "", &InputError{File: dir, Offset: -1,
		Err: fmt.Errorf("directory holds no .safetensors file and no *%s: %w", IndexSuffix, fs.ErrNotExist)}
}

// indexEntry is one weight_map entry.
type indexEntry struct {
	tensor, shard string
	at            int64 // offset of the tensor name in the index
}

// shardIndex is a parsed index file.
type shardIndex struct {
	entries   []indexEntry // in file order
	totalSize int64        // -1 when absent
	ignored   []string     // top-level keys other than "metadata" and "weight_map"
}

// parseIndex decodes and validates b, the bytes of the index file: a JSON
// object with a "weight_map" object of non-empty strings and an optional
// "metadata" object whose "total_size", when present, is a non-negative
// integer. Duplicate keys are errors; other metadata keys are ignored, and
// other top-level keys are reported in ignored.
func parseIndex(file string, b []byte) (*shardIndex, error) {
	p, err := newJSONParser(file, b, 0, ErrIndex, "index")
	if err != nil {
		return nil, err
	}
	if _, err := p.expectDelim("", '{', "index"); err != nil {
		return nil, err
	}
	idx := &shardIndex{totalSize: -1}
	haveMap := false
	err = p.members("the index", false, func(key string, _ int64) (err error) {
		switch key {
		case "weight_map":
			haveMap = true
			idx.entries, err = p.parseWeightMap()
		case "metadata":
			idx.totalSize, err = p.parseIndexMetadata()
		default:
			idx.ignored = append(idx.ignored, key)
			err = p.skipValue()
		}
		return err
	})
	if err != nil {
		return nil, err
	}
	if err := p.end("index"); err != nil {
		return nil, err
	}
	if !haveMap {
		return nil, inputError(file, "", 0, ErrIndex, `index has no "weight_map"`)
	}
	if len(idx.entries) == 0 {
		return nil, inputError(file, "", 0, ErrIndex, `"weight_map" lists no tensor`)
	}
	return idx, nil
}

// members reads the members of a JSON object whose opening brace has been
// read, up to its closing brace (excluded). Keys must be unique; member is
// called with each key and its offset and must read the value. With
// tensorKeys, errors name the key as the tensor.
func (p *headerParser) members(what string, tensorKeys bool, member func(key string, at int64) error) error {
	seen := map[string]bool{}
	for p.dec.More() {
		tok, at, err := p.next("")
		if err != nil {
			return err
		}
		key, _ := tok.(string) // object keys are always strings
		tensor := ""
		if tensorKeys {
			tensor = key
		}
		if seen[key] {
			return p.fail(tensor, at, p.bad, "duplicate key %q in %s", key, what)
		}
		seen[key] = true
		if err := member(key, at); err != nil {
			return err
		}
	}
	return nil
}

func (p *headerParser) parseWeightMap() ([]indexEntry, error) {
	if _, err := p.expectDelim("", '{', `"weight_map"`); err != nil {
		return nil, err
	}
	var entries []indexEntry
	err := p.members(`"weight_map"`, true, func(name string, at int64) error {
		tok, vat, err := p.next(name)
		if err != nil {
			return err
		}
		shard, ok := tok.(string)
		if !ok || shard == "" {
			return p.fail(name, vat, ErrIndex, "shard of tensor %q must be a non-empty string, found %s", name, describe(tok))
		}
		entries = append(entries, indexEntry{tensor: name, shard: shard, at: at})
		return nil
	})
	if err != nil {
		return nil, err
	}
	_, err = p.expectDelim("", '}', `"weight_map"`)
	return entries, err
}

// parseIndexMetadata reads the index "metadata" object and returns its
// "total_size", or -1 when it has none.
func (p *headerParser) parseIndexMetadata() (int64, error) {
	if _, err := p.expectDelim("", '{', `"metadata"`); err != nil {
		return 0, err
	}
	total := int64(-1)
	err := p.members(`"metadata"`, false, func(key string, _ int64) (err error) {
		if key != "total_size" {
			return p.skipValue()
		}
		total, err = p.nonNegative("", "total_size")
		return err
	})
	if err != nil {
		return 0, err
	}
	_, err = p.expectDelim("", '}', `"metadata"`)
	return total, err
}

// skipValue consumes one JSON value of any kind.
func (p *headerParser) skipValue() error {
	depth := 0
	for {
		tok, _, err := p.next("")
		if err != nil {
			return err
		}
		switch tok {
		case json.Delim('{'), json.Delim('['):
			depth++
		case json.Delim('}'), json.Delim(']'):
			depth--
		}
		if depth == 0 {
			return nil
		}
	}
}

// readIndex reads the whole index file, refusing one larger than the
// header cap before allocating.
func readIndex(path string, maxBytes int64) ([]byte, error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return nil, openError(path, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return nil, &InputError{File: path, Offset: -1, Err: fmt.Errorf("stat: %w", err)}
	}
	if fi.Size() > maxBytes {
		return nil, inputError(path, "", 0, ErrIndex, "index is %d bytes, over the cap of %d", fi.Size(), maxBytes)
	}
	b := make([]byte, fi.Size())
	if got, err := io.ReadFull(f, b); err != nil {
		return nil, inputError(path, "", int64(got), ErrTruncated, "read %d of %d index bytes: %v", got, len(b), err)
	}
	return b, nil
}

// openIndex opens every shard of the sharded set described by the index at
// path and checks them against its weight_map.
func openIndex(path string, lim Limits) (*Source, error) {
	b, err := readIndex(path, lim.MaxHeaderBytes)
	if err != nil {
		return nil, err
	}
	idx, err := parseIndex(path, b)
	if err != nil {
		return nil, err
	}
	dir := filepath.Dir(path)
	root, err := os.OpenRoot(dir)
	if err != nil {
		return nil, openError(dir, err)
	}
	defer root.Close()

	// Shards in name order; each remembers the first entry naming it, to
	// locate errors in the index.
	first := map[string]indexEntry{}
	var names []string
	for _, e := range idx.entries {
		if _, ok := first[e.shard]; !ok {
			first[e.shard] = e
			names = append(names, e.shard)
		}
	}
	sort.Strings(names)

	src := &Source{Path: path}
	complete := false
	defer func() {
		if !complete {
			src.Close()
		}
	}()
	var metadata []map[string]string
	for _, name := range names {
		e := first[name]
		f, err := openShard(root, path, e)
		if err != nil {
			return nil, err
		}
		shardPath := filepath.Join(dir, name)
		of, size, md, err := readHeader(shardPath, f, lim)
		if err != nil {
			f.Close()
			return nil, err
		}
		src.Files = append(src.Files, SourceFile{Path: shardPath, Size: size})
		src.open = append(src.open, of)
		src.Tensors = append(src.Tensors, of.tensors...)
		if len(src.Tensors) > lim.MaxTensors {
			return nil, inputError(shardPath, "", -1, ErrHeader, "the set holds more than %d tensors, over the limit", lim.MaxTensors)
		}
		metadata = append(metadata, md)
	}
	if err := checkWeightMap(path, idx, src, names); err != nil {
		return nil, err
	}
	src.Metadata, src.Warnings = mergeMetadata(names, metadata)
	var data int64
	for _, t := range src.Tensors {
		data += t.Length
	}
	if idx.totalSize >= 0 && idx.totalSize != data {
		src.Warnings = append(src.Warnings, fmt.Sprintf(
			"%s: \"metadata\" total_size %d differs from the %d bytes of tensor data in the %d shards", path, idx.totalSize, data, len(names)))
	}
	if len(idx.ignored) > 0 {
		src.Warnings = append(src.Warnings, fmt.Sprintf("%s: ignored top-level keys %q", path, idx.ignored))
	}
	complete = true
	return src, nil
}

// openShard opens the shard that entry e of the index names, inside root.
func openShard(root *os.Root, index string, e indexEntry) (*os.File, error) {
	fail := func(format string, args ...any) *InputError {
		return inputError(index, e.tensor, e.at, ErrIndex, format, args...)
	}
	if filepath.IsAbs(e.shard) || !filepath.IsLocal(e.shard) {
		return nil, fail("shard %q leaves the index's directory", e.shard)
	}
	f, err := inputfile.OpenInRoot(root, e.shard)
	if err == nil {
		return f, nil
	}
	switch target, lerr := root.Readlink(e.shard); {
	case errors.Is(err, fs.ErrNotExist):
		return nil, &InputError{File: index, Tensor: e.tensor, Offset: e.at,
			Err: fmt.Errorf("%w: missing shard %q: %w", ErrIndex, e.shard, fs.ErrNotExist)}
	case lerr == nil && !errors.Is(err, syscall.ELOOP):
		return nil, fail("shard %q is a symbolic link to %q, which leaves the index's directory", e.shard, target)
	}
	var pe *fs.PathError
	if errors.As(err, &pe) {
		err = pe.Err
	}
	return nil, fail("shard %q: %v", e.shard, err)
}

// checkWeightMap requires every tensor name to be unique across shards and
// the weight_map to list exactly the tensors each shard holds.
func checkWeightMap(index string, idx *shardIndex, src *Source, names []string) error {
	shardOf := make(map[string]int, len(src.Tensors)) // tensor name → index in names
	for i, of := range src.open {
		for _, t := range of.tensors {
			if j, dup := shardOf[t.Name]; dup {
				return inputError(t.File, t.Name, t.entryAt, ErrIndex, "tensor %q is also in shard %q", t.Name, names[j])
			}
			shardOf[t.Name] = i
		}
	}
	listed := make(map[string]bool, len(idx.entries))
	for _, e := range idx.entries {
		listed[e.tensor] = true
		i, ok := shardOf[e.tensor]
		switch {
		case !ok:
			return inputError(index, e.tensor, e.at, ErrIndex, "\"weight_map\" puts tensor %q in shard %q, which does not hold it", e.tensor, e.shard)
		case names[i] != e.shard:
			return inputError(index, e.tensor, e.at, ErrIndex, "\"weight_map\" puts tensor %q in shard %q, but shard %q holds it", e.tensor, e.shard, names[i])
		}
	}
	for _, t := range src.Tensors {
		if !listed[t.Name] {
			return inputError(t.File, t.Name, t.entryAt, ErrIndex, "tensor %q is not listed in the index's \"weight_map\"", t.Name)
		}
	}
	return nil
}

// mergeMetadata merges the "__metadata__" of the shards (names in order).
// A key with one value in every shard that has it is kept as is; a key
// whose value differs between shards is recorded once per shard as
// KEY@SHARD, with a warning. Without any metadata the result is nil.
func mergeMetadata(names []string, metadata []map[string]string) (map[string]string, []string) {
	values := map[string][]int{} // key → shards that have it
	for i, md := range metadata {
		for k := range md {
			values[k] = append(values[k], i)
		}
	}
	if len(values) == 0 {
		return nil, nil
	}
	merged := map[string]string{}
	var warnings []string
	for _, k := range slices.Sorted(maps.Keys(values)) {
		shards := values[k]
		v := metadata[shards[0]][k]
		same := true
		for _, i := range shards[1:] {
			same = same && metadata[i][k] == v
		}
		if same {
			merged[k] = v
			continue
		}
		for _, i := range shards {
			merged[k+"@"+names[i]] = metadata[i][k]
		}
		warnings = append(warnings, fmt.Sprintf("\"__metadata__\" key %q differs between shards; recorded per shard as %q", k, k+"@SHARD"))
	}
	return merged, warnings
}
