package pack

import (
	"bufio"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
)

// Options control Build.
type Options struct {
	Codec  Codec                                  // trit codec for ternary tensors
	Recipe convert.Recipe                         // ternarization recipe
	Policy func(t *convert.Tensor) convert.Action // nil means convert.DefaultPolicy
	Tool   string                                 // recorded as the manifest's "tool"
}

// ErrPolicy reports a policy decision the tensor cannot take.
var ErrPolicy = errors.New("policy cannot apply")

// Build reads every tensor of src once, ternarizes or keeps it, and writes
// the artifact to dst atomically: a temporary file in dst's directory,
// fsync, rename. On error nothing is left at dst. Input problems are
// *convert.InputError values naming file, tensor and byte offset.
func Build(src *convert.Source, dst string, opts Options) (*manifest.Manifest, error) {
	if _, err := ParseCodec(string(opts.Codec)); err != nil {
		return nil, err
	}
	if err := opts.Recipe.Validate(); err != nil {
		return nil, err
	}
	policy := opts.Policy
	if policy == nil {
		policy = convert.DefaultPolicy
	}
	w, err := createAtomic(dst)
	if err != nil {
		return nil, err
	}
	defer w.abort()

	m := &manifest.Manifest{
		Format:  manifest.FormatName,
		Version: manifest.Version,
		Tool:    opts.Tool,
		Recipe:  opts.Recipe,
		Source:  manifest.Source{Metadata: src.Metadata},
		Tensors: make([]manifest.Tensor, 0, len(src.Tensors)),
	}
	// The minor version depends on the codecs chosen; finish rewrites it.
	if err := w.write(encodePreamble(0)); err != nil {
		return nil, err
	}
	var (
		floats  []float32
		trits   []int8
		payload []byte
	)
	err = src.Walk(func(t *convert.Tensor, raw []byte, sum [32]byte) error {
		e := manifest.Tensor{
			Name:         t.Name,
			Shape:        t.Shape,
			SourceDType:  t.DType,
			SourceBLAKE3: manifest.HexHash(sum),
		}
		section := raw
		switch action := policy(t); action {
		case convert.ActionKeep:
			e.Kind, e.Codec = manifest.KindKept, manifest.CodecRaw
		case convert.ActionTernary:
			if !t.IsFloat() {
				return &convert.InputError{File: t.File, Tensor: t.Name, Offset: t.Offset,
					Err: fmt.Errorf("%w: ternary needs a float tensor, dtype is %q", ErrPolicy, t.DType)}
			}
			n := int(t.NumElements())
			floats = grow(floats, n)
			trits = grow(trits, n)
			if err := convert.DecodeFloat32(t.DType, raw, floats); err != nil {
				return &convert.InputError{File: t.File, Tensor: t.Name, Offset: t.Offset, Err: err}
			}
			q, err := convert.Ternarize(floats, opts.Recipe, trits)
			if err != nil {
				off := t.Offset
				var nf *convert.NonFiniteError
				if errors.As(err, &nf) {
					size, _ := convert.DTypeSize(t.DType)
					off += int64(nf.Index) * int64(size)
				}
				return &convert.InputError{File: t.File, Tensor: t.Name, Offset: off, Err: err}
			}
			var codec Codec
			payload, codec = opts.Codec.EncodeTensor(payload[:0], trits)
			section = payload
			e.Kind, e.Codec, e.Scale = manifest.KindTernary, string(codec), q.Scale
			counts, rel, maxErr := q.Counts, q.RelRMSE, q.MaxAbsErr
			e.Trits, e.RelRMSE, e.MaxAbsErr = &counts, &rel, &maxErr
		default:
			return fmt.Errorf("tensor %q: %w: unknown action %q", t.Name, ErrPolicy, action)
		}
		s, err := w.section(section)
		if err != nil {
			return err
		}
		e.Section = s
		m.Tensors = append(m.Tensors, e)
		return nil
	})
	if err != nil {
		return nil, err
	}
	for _, f := range src.Files {
		m.Source.Files = append(m.Source.Files, manifest.SourceFile{
			Name: filepath.Base(f.Path), Bytes: f.Size, BLAKE3: manifest.HexHash(f.BLAKE3),
		})
	}
	m.ComputeTotals()
	if err := w.finish(m); err != nil {
		return nil, err
	}
	return m, nil
}

func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// atomicWriter writes an artifact to a temporary file beside its
// destination and renames it into place on finish.
type atomicWriter struct {
	dst  string
	f    *os.File
	bw   *bufio.Writer
	off  int64
	done bool
}

func createAtomic(dst string) (*atomicWriter, error) {
	dir := filepath.Dir(dst)
	f, err := os.CreateTemp(dir, "."+filepath.Base(dst)+".tmp-*")
	if err != nil {
		return nil, fmt.Errorf("create %s: %w", dst, err)
	}
	return &atomicWriter{dst: dst, f: f, bw: bufio.NewWriterSize(f, 1<<20)}, nil
}

func (w *atomicWriter) write(p []byte) error {
	n, err := w.bw.Write(p)
	w.off += int64(n)
	if err != nil {
		return fmt.Errorf("write %s: %w", w.dst, err)
	}
	return nil
}

var zeros [Align]byte

func (w *atomicWriter) pad() error {
	return w.write(zeros[:alignUp(w.off)-w.off])
}

// section pads to the alignment, writes p and returns its manifest entry.
func (w *atomicWriter) section(p []byte) (manifest.Section, error) {
	if err := w.pad(); err != nil {
		return manifest.Section{}, err
	}
	s := manifest.Section{Offset: w.off, Length: int64(len(p)), BLAKE3: manifest.HexHash(blake3.Sum256(p))}
	return s, w.write(p)
}

func (w *atomicWriter) finish(m *manifest.Manifest) error {
	body, err := manifest.Encode(m)
	if err != nil {
		return err
	}
	if err := w.pad(); err != nil {
		return err
	}
	t := trailer{manifestOffset: w.off, manifestLen: int64(len(body)), manifestHash: blake3.Sum256(body)}
	if err := w.write(body); err != nil {
		return err
	}
	if err := w.write(t.encode()); err != nil {
		return err
	}
	if err := w.bw.Flush(); err != nil {
		return fmt.Errorf("write %s: %w", w.dst, err)
	}
	if _, err := w.f.WriteAt(encodePreamble(minorVersionFor(m)), 0); err != nil {
		return fmt.Errorf("write %s: %w", w.dst, err)
	}
	if err := w.f.Sync(); err != nil {
		return fmt.Errorf("sync %s: %w", w.dst, err)
	}
	if err := w.f.Close(); err != nil {
		return fmt.Errorf("close %s: %w", w.dst, err)
	}
	if err := os.Rename(w.f.Name(), w.dst); err != nil {
		return fmt.Errorf("rename into %s: %w", w.dst, err)
	}
	w.done = true
	if d, err := os.Open(filepath.Dir(w.dst)); err == nil {
		_ = d.Sync() // best effort: some filesystems refuse directory sync
		d.Close()
	}
	return nil
}

// abort removes the temporary file unless finish succeeded.
func (w *atomicWriter) abort() {
	if w.done {
		return
	}
	w.f.Close()
	os.Remove(w.f.Name())
}
