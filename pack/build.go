package pack

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"runtime"
	"slices"
	"time"

	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/atomicfile"
	"ternkit/manifest"
)

// Options control Build.
type Options struct {
	Codec  Codec           // trit codec for ternary tensors
	Recipe convert.Recipe  // ternarization recipe
	Policy *convert.Policy // nil means convert.DefaultPolicy()
	// Workers quantize tensors in parallel, and share the work of one
	// tensor of at least convert.SplitMinElements weights; 0 means one per
	// CPU. The bytes written are the same for any count.
	Workers int
	// Budget bounds the source bytes in flight (0: convert.DefaultWalkBudget).
	Budget int64
	Tool   string // recorded as the manifest's "tool"
	// PolicyRules describes Policy in words, recorded as the manifest's
	// "policy"; nil records Policy.Describe() (what verify --against reads
	// back to tie each tensor's action to the source), an empty list none.
	PolicyRules []string
	// Created is recorded as the manifest's "created"; the zero time
	// records none, so that the same inputs give the same bytes.
	Created time.Time
	// Companions are files carried beside the weights (format 1.3), in
	// this order; each is checked by CheckCompanion before anything is
	// written.
	Companions []Companion
	// Progress, when set, is called with the source tensor bytes read so
	// far and their total: once before the first tensor and after each one.
	// It runs on Build's goroutine and must return quickly.
	Progress func(done, total int64)

	// gate bounds the goroutines quantizing at once to Workers: a tensor
	// job holds a slot, and a large tensor's extra goroutines take more.
	gate *convert.Gate
}

// Build reads every tensor of src once, quantizes or keeps it as the
// policy says, and writes the artifact to dst atomically: a temporary file
// in dst's directory, fsync, rename. On error nothing is left at dst. The
// policy is applied to every tensor before anything is written, so a rule a
// tensor cannot take fails first. Input problems are *convert.InputError
// values naming file, tensor and byte offset.
func Build(src *convert.Source, dst string, opts Options) (*manifest.Manifest, error) {
	if _, err := ParseCodec(string(opts.Codec)); err != nil {
		return nil, err
	}
	if err := opts.Recipe.Validate(); err != nil {
		return nil, err
	}
	if i := slices.Index(opts.PolicyRules, ""); i >= 0 {
		return nil, fmt.Errorf("%w: policy rule %d is empty", manifest.ErrInvalid, i)
	}
	policy := opts.Policy
	if policy == nil {
		policy = convert.DefaultPolicy()
	}
	if opts.PolicyRules == nil {
		opts.PolicyRules = policy.Describe()
	}
	if err := checkCompanions(opts.Companions); err != nil {
		return nil, err
	}
	if err := checkDestination(src, dst, opts.Companions); err != nil {
		return nil, err
	}
	actions := make(map[*convert.Tensor]convert.Action, len(src.Tensors))
	for _, t := range src.Tensors {
		a, _, err := policy.Decide(t)
		if err != nil {
			return nil, &convert.InputError{File: t.File, Tensor: t.Name, Offset: t.Offset, Err: err}
		}
		actions[t] = a
	}
	if err := checkManifestSize(src, actions); err != nil {
		return nil, err
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
		Policy:  slices.Clip(opts.PolicyRules),
		Source:  manifest.Source{Metadata: src.Metadata},
		Tensors: make([]manifest.Tensor, 0, len(src.Tensors)),
	}
	if len(m.Policy) == 0 {
		m.Policy = nil
	}
	if !opts.Created.IsZero() {
		m.Created = manifest.CreatedAt(opts.Created)
	}
	// The minor version depends on the codecs chosen; finish rewrites it.
	if err := w.write(encodePreamble(0)); err != nil {
		return nil, err
	}
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	opts.Workers, opts.gate = workers, convert.NewGate(workers)
	bufs := make([]quantizeBuffers, workers)
	advance := progressFunc(opts.Progress, src.Tensors)
	type packed struct {
		entry manifest.Tensor
		out   sections
	}
	// a large tensor kept as it is comes in pieces, written as they come:
	// its bytes cost a piece of memory, not their length
	var piece struct {
		entry  manifest.Tensor
		hashes *sectionHasher
	}
	walk := convert.WalkOptions{Workers: workers, Budget: opts.Budget,
		InPieces: func(t *convert.Tensor) bool { return t.Length > keptPieceSize && keptAsIs(actions[t], t) },
		Piece: func(t *convert.Tensor, off int64, p []byte, id *convert.SourceID) error {
			if off == 0 {
				if err := w.pad(); err != nil {
					return err
				}
				piece.entry = manifest.Tensor{Name: t.Name, Shape: t.Shape, SourceDType: t.DType,
					Kind: manifest.KindKept, Codec: manifest.CodecRaw, DType: t.DType,
					Section: manifest.Section{Offset: w.off, Length: t.Length}}
				piece.hashes = newSectionHasher(workers)
			}
			// the piece is hashed while the sequencer writes it: the write
			// (a copy into the page cache) is the longer of the two
			var faults convert.FaultRelay // p is the mapped source
			hashed := make(chan struct{})
			go func() {
				defer close(hashed)
				faults.Run(func() { piece.hashes.Write(p) })
			}()
			err := w.write(p)
			<-hashed
			faults.Raise()
			if err != nil {
				return err
			}
			advance(int64(len(p)))
			if id != nil {
				e := piece.entry
				e.SourceSpan = manifest.HexHash(id.Span)
				e.Section = piece.hashes.section()
				e.Section.Offset = piece.entry.Section.Offset
				m.Tensors = append(m.Tensors, e)
			}
			return nil
		}}
	err = convert.WalkOrdered(src, walk,
		func(worker int, t *convert.Tensor, raw []byte) (packed, error) {
			e := manifest.Tensor{
				Name:        t.Name,
				Shape:       t.Shape,
				SourceDType: t.DType,
			}
			opts.gate.Acquire()
			out, err := bufs[worker].apply(&e, t, raw, actions[t], opts)
			opts.gate.Release()
			if err != nil {
				return packed{}, err
			}
			e.Section = hashSection(out.payload)
			if out.scales != nil {
				s := hashSection(out.scales)
				e.Scales = &s
			}
			return packed{e, out}, nil
		},
		func(t *convert.Tensor, id convert.SourceID, p packed) error {
			e := p.entry
			e.SourceSpan = manifest.HexHash(id.Span)
			var err error
			if e.Section.Offset, err = w.place(p.out.payload); err != nil {
				return err
			}
			if e.Scales != nil {
				if e.Scales.Offset, err = w.place(p.out.scales); err != nil {
					return err
				}
			}
			m.Tensors = append(m.Tensors, e)
			advance(t.Length)
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
	for _, c := range opts.Companions {
		entry, err := w.writeCompanion(c)
		if err != nil {
			return nil, err
		}
		m.Companions = append(m.Companions, entry)
	}
	m.ComputeTotals()
	if err := w.finish(m); err != nil {
		return nil, err
	}
	return m, nil
}

// quantizeBuffers are one worker's scratch space, reused from tensor to
// tensor; what a tensor writes is allocated afresh, since it is written
// after the worker has moved on.
type quantizeBuffers struct {
	floats []float32
}

// sections is what one tensor writes: its payload and, for row, group and
// int8 tensors, its scales.
type sections struct {
	payload []byte
	scales  []byte
}

// apply carries out action a on tensor t, filling the entry's kind, codec,
// granularity, scales and statistics.
func (q *quantizeBuffers) apply(e *manifest.Tensor, t *convert.Tensor, raw []byte, a convert.Action, opts Options) (sections, error) {
	fail := func(err error) error {
		off := t.Offset
		var nf *convert.NonFiniteError
		if errors.As(err, &nf) {
			size, _ := convert.DTypeSize(t.DType)
			off += int64(nf.Index) * int64(size)
		}
		return &convert.InputError{File: t.File, Tensor: t.Name, Offset: off, Err: err}
	}
	target := a.KeptDType(t.DType)
	if keptAsIs(a, t) {
		e.Kind, e.Codec, e.DType = manifest.KindKept, manifest.CodecRaw, t.DType
		return sections{payload: raw}, nil
	}
	n := int(t.NumElements())
	cols := convert.Columns(t.Shape)
	if a.Kind == convert.ActTernary && t.DType == "BF16" && len(raw) == 2*n {
		// the common case: the kernels read the BF16 bytes in place
		out, err := ternary(e, a, convert.BF16Weights(raw), cols, opts)
		if err != nil {
			return sections{}, fail(err)
		}
		return out, nil
	}
	switch a.Kind {
	case convert.ActTernary:
		// weights to quantize: F8 decoded too, NaN, Inf and F64 overflow refused
		q.floats = grow(q.floats, n)
		if err := t.DecodeWeights(raw, q.floats); err != nil {
			return sections{}, err
		}
		out, err := ternary(e, a, convert.Float32Weights(q.floats), cols, opts)
		if err != nil {
			return sections{}, fail(err)
		}
		return out, nil
	case convert.ActInt8:
		return q.int8Rows(e, t, raw, cols, fail)
	}
	// keep:f16, keep:bf16, keep:f32 with a dtype change
	return q.convertDType(e, t, raw, target, fail)
}

// ternary quantizes w, encoding the trits as they come, and fills the
// entry of a ternary tensor. A large tensor's work is shared by up to
// opts.Workers goroutines (convert.TernarizeSplit): the same bytes.
func ternary(e *manifest.Tensor, a convert.Action, w convert.Weights, cols int, opts Options) (sections, error) {
	enc, err := NewSplitEncoder(opts.Codec, w.Len())
	if err != nil {
		return sections{}, err
	}
	res, err := convert.TernarizeSplit(w, cols, a.Granularity, opts.Recipe,
		convert.Split{Workers: opts.Workers, Gate: opts.gate, Range: enc.Range})
	if err != nil {
		return sections{}, err
	}
	payload, codec := enc.Finish(res.Counts)
	g := a.Granularity
	e.Kind, e.Codec, e.Granularity, e.Exact = manifest.KindTernary, string(codec), &g, res.Exact
	e.Trits, e.Stats = &res.Counts, &res.Stats
	if g.Kind == convert.GranTensor {
		e.Scale = res.Scales[0]
		return sections{payload: payload}, nil
	}
	return sections{payload: payload, scales: appendFloat32s([]byte{}, res.Scales)}, nil
}

// keptAsIs reports whether action a keeps tensor t's bytes as they are.
func keptAsIs(a convert.Action, t *convert.Tensor) bool {
	return a.Kind == convert.ActKeep ||
		(a.Kind != convert.ActTernary && a.Kind != convert.ActInt8 && a.KeptDType(t.DType) == t.DType)
}

// keptPieceSize is the piece a large tensor kept as it is comes in (a
// variable for tests); a multiple of manifest.ChunkSize is quickest.
var keptPieceSize int64 = convert.DefaultPieceSize

func appendFloat32s(dst []byte, v []float32) []byte {
	for _, f := range v {
		dst = binary.LittleEndian.AppendUint32(dst, math.Float32bits(f))
	}
	return dst
}

func int8Bytes(s []int8) []byte { return unsafeInt8Bytes(s) }

// progressFunc returns the function Build calls after each tensor of n
// source bytes.
func progressFunc(fn func(done, total int64), tensors []*convert.Tensor) func(n int64) {
	if fn == nil {
		return func(int64) {}
	}
	var done, total int64
	for _, t := range tensors {
		total += t.Length
	}
	fn(0, total)
	return func(n int64) {
		done += n
		fn(done, total)
	}
}

func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// atomicWriter writes an artifact through an atomicfile.File (temporary
// file beside the destination, fsync, rename, directory fsync) and keeps
// the offset for the layout.
type atomicWriter struct {
	f   *atomicfile.File
	off int64
}

func createAtomic(dst string) (*atomicWriter, error) {
	f, err := atomicfile.Create(dst, 0o644)
	if err != nil {
		return nil, err
	}
	// an artifact is written once and read later, if at all, by another
	// process: its bytes need not pass through this one's page cache
	f.Direct()
	return &atomicWriter{f: f}, nil
}

func (w *atomicWriter) write(p []byte) error {
	n, err := w.f.Write(p)
	w.off += int64(n)
	return err
}

var zeros [Align]byte

func (w *atomicWriter) pad() error {
	return w.write(zeros[:alignUp(w.off)-w.off])
}

// hashSection is the manifest entry of a section holding p, but for its
// offset: its BLAKE3 and, past manifest.ChunkSize, its piece chaining
// values, each byte hashed once, pieces in parallel.
func hashSection(p []byte) manifest.Section {
	return sectionOf(p, runtime.GOMAXPROCS(0))
}

// hashSectionKnown is hashSection for bytes whose BLAKE3 is known: a
// section of one piece takes it as it is; a longer one needs its pieces'
// chaining values, which give its BLAKE3 as well.
func hashSectionKnown(p []byte, sum [32]byte) manifest.Section {
	if manifest.NumChunks(int64(len(p))) == 0 {
		return manifest.Section{Length: int64(len(p)), BLAKE3: manifest.HexHash(sum)}
	}
	return hashSection(p)
}

// place pads to the alignment, writes p and returns its offset.
func (w *atomicWriter) place(p []byte) (int64, error) {
	if err := w.pad(); err != nil {
		return 0, err
	}
	off := w.off
	return off, w.write(p)
}

func (w *atomicWriter) finish(m *manifest.Manifest) error {
	if err := w.pad(); err != nil {
		return err
	}
	t := trailer{manifestOffset: w.off}
	m.Minor = manifest.MinorKey() // new artifacts are of the newest format
	h := blake3.New()
	n, err := writeManifest(io.MultiWriter(writerFunc(w.write), h), m)
	if err != nil {
		return err
	}
	t.manifestLen = n
	h.Sum(t.manifestHash[:0])
	if err := w.write(t.encode()); err != nil {
		return err
	}
	// the minor version depends on the codecs chosen: set it now
	if err := w.f.WriteAt(encodePreamble(minorVersionFor(m)), 0); err != nil {
		return err
	}
	return w.f.Commit()
}

// writerFunc adapts a write function to io.Writer.
type writerFunc func(p []byte) error

func (f writerFunc) Write(p []byte) (int, error) {
	if err := f(p); err != nil {
		return 0, err
	}
	return len(p), nil
}

// writeManifest writes the bytes manifest.Encode gives for m, one tensor
// entry at a time, so that the manifest is never held whole in memory; it
// refuses to go past writeMaxManifest. It returns the length written.
func writeManifest(out io.Writer, m *manifest.Manifest) (int64, error) {
	skeleton := *m
	skeleton.Tensors = nil
	head, err := manifest.Encode(&skeleton)
	if err != nil {
		return 0, err
	}
	const hole = `"tensors":null`
	at := bytes.Index(head, []byte(hole))
	if at < 0 || bytes.Count(head, []byte(hole)) != 1 {
		return 0, fmt.Errorf("encode manifest: no single place for the tensors")
	}
	var n int64
	put := func(p []byte) error {
		if n += int64(len(p)); n > writeMaxManifest {
			return fmt.Errorf("%w: more than %d bytes", ErrManifestTooLarge, writeMaxManifest)
		}
		_, err := out.Write(p)
		return err
	}
	if err := put(append(head[:at:at], `"tensors":[`...)); err != nil {
		return n, err
	}
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false) // as manifest.Encode
	for i := range m.Tensors {
		buf.Reset()
		if i > 0 {
			buf.WriteByte(',')
		}
		if err := enc.Encode(&m.Tensors[i]); err != nil {
			return n, fmt.Errorf("encode manifest: %w", err)
		}
		if err := put(bytes.TrimSuffix(buf.Bytes(), []byte("\n"))); err != nil {
			return n, err
		}
	}
	if err := put(append([]byte("]"), head[at+len(hole):]...)); err != nil {
		return n, err
	}
	return n, nil
}

// abort removes the temporary file unless finish succeeded.
func (w *atomicWriter) abort() { w.f.Abort() }
