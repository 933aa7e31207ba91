package probe

import (
	"fmt"
	"os"
	"runtime"
	"sync"

	"ternkit/convert"
)

// Weights gives a forward pass the tensors of one model, one at a time:
// nothing is held between calls, so memory follows the tensor in use.
type Weights interface {
	// Name names the model (a file) in messages.
	Name() string
	// FloatNames lists the float tensors (the ones the layout must place).
	FloatNames() []string
	// Shape is a float tensor's shape; ok is false when it is absent.
	Shape(name string) (shape []int64, ok bool)
	// Vector returns a 1-D tensor (a norm weight, a bias) as float32.
	Vector(name string) ([]float32, error)
	// Rows returns rows ids of a 2-D tensor (embedding lookup), each of
	// the tensor's columns, one after another.
	Rows(name string, ids []int32) ([]float32, error)
	// Linear returns y = x·Wᵀ for ntok tokens: x holds ntok rows of the
	// tensor's columns, y ntok rows of its rows.
	Linear(name string, x []float32, ntok int) ([]float32, error)
	Close() error
}

// rowDecoder writes rows r0 … r1−1 of a matrix, as float32, to dst.
type rowDecoder func(r0, r1 int, dst []float32) error

// blockElems is how many weights a float product decodes at a time.
const blockElems = 1 << 16

// floatLinear is y = x·Wᵀ with W decoded in blocks of rows, the blocks
// shared among the CPUs; each dot product adds in float32 in eight lanes.
func floatLinear(rows, cols int, dec rowDecoder, x []float32, ntok int) ([]float32, error) {
	y := make([]float32, ntok*rows)
	if rows == 0 || cols == 0 {
		return y, nil
	}
	rowsPer := max(1, blockElems/cols)
	blocks := (rows + rowsPer - 1) / rowsPer
	err := parallel(blocks, func(next func() (int, bool)) error {
		buf := make([]float32, min(rowsPer, rows)*cols)
		for {
			b, ok := next()
			if !ok {
				return nil
			}
			r0 := b * rowsPer
			r1 := min(rows, r0+rowsPer)
			w := buf[:(r1-r0)*cols]
			if err := dec(r0, r1, w); err != nil {
				return err
			}
			t := 0
			for ; t+2 <= ntok; t += 2 {
				x0, x1 := x[t*cols:(t+1)*cols], x[(t+1)*cols:(t+2)*cols]
				for r := r0; r < r1; r++ {
					y[t*rows+r], y[(t+1)*rows+r] = dot2F32(w[(r-r0)*cols:(r-r0+1)*cols], x0, x1)
				}
			}
			if t < ntok {
				xt := x[t*cols : (t+1)*cols]
				for r := r0; r < r1; r++ {
					y[t*rows+r] = dotF32(w[(r-r0)*cols:(r-r0+1)*cols], xt)
				}
			}
		}
	})
	return y, err
}

// parallel runs work on every CPU; each worker takes item numbers from
// next until none is left. The first error stops the others.
func parallel(items int, work func(next func() (int, bool)) error) error {
	var (
		mu    sync.Mutex
		i     int
		first error
	)
	next := func() (int, bool) {
		mu.Lock()
		defer mu.Unlock()
		if i >= items || first != nil {
			return 0, false
		}
		i++
		return i - 1, true
	}
	workers := min(items, runtime.GOMAXPROCS(0))
	var wg sync.WaitGroup
	for range workers {
		wg.Go(func() {
			if err := work(next); err != nil {
				mu.Lock()
				if first == nil {
					first = err
				}
				mu.Unlock()
			}
		})
	}
	wg.Wait()
	return first
}

// matrixDims is rows × columns of a tensor of 2 or more dimensions.
func matrixDims(shape []int64) (rows, cols int, ok bool) {
	if len(shape) < 2 {
		return 0, 0, false
	}
	return int(shape[0]), int(convert.Columns(shape)), true
}

// SourceWeights reads a safetensors checkpoint (one file or a sharded
// set), decoding each tensor from its stored dtype to float32 as it is
// used.
type SourceWeights struct {
	src    *convert.Source
	files  map[string]*os.File
	byName map[string]*convert.Tensor
}

// OpenSource opens a checkpoint for a forward pass.
func OpenSource(path string) (*SourceWeights, error) {
	s, err := convert.Open(path)
	if err != nil {
		return nil, err
	}
	w := &SourceWeights{src: s, files: map[string]*os.File{}, byName: map[string]*convert.Tensor{}}
	for _, t := range s.Tensors {
		w.byName[t.Name] = t
		if _, ok := w.files[t.File]; !ok {
			f, err := os.Open(t.File)
			if err != nil {
				w.Close()
				return nil, err
			}
			w.files[t.File] = f
		}
	}
	return w, nil
}

func (w *SourceWeights) Name() string { return w.src.Path }

func (w *SourceWeights) Close() error {
	for _, f := range w.files {
		f.Close()
	}
	return w.src.Close()
}

func (w *SourceWeights) FloatNames() []string {
	var names []string
	for _, t := range w.src.Tensors {
		if t.Ternarizable() {
			names = append(names, t.Name)
		}
	}
	return names
}

func (w *SourceWeights) Shape(name string) ([]int64, bool) {
	t, ok := w.byName[name]
	if !ok || !t.Ternarizable() {
		return nil, false
	}
	return t.Shape, true
}

func (w *SourceWeights) tensor(name string) (*convert.Tensor, error) {
	t, ok := w.byName[name]
	if !ok || !t.Ternarizable() {
		return nil, fmt.Errorf("%w: %s: no float tensor %q", ErrLayout, w.src.Path, name)
	}
	return t, nil
}

// read decodes elements [i0, i1) of a tensor into dst.
func (w *SourceWeights) read(t *convert.Tensor, i0, i1 int, dst []float32) error {
	size, _ := convert.DTypeSize(t.DType)
	raw := make([]byte, (i1-i0)*size)
	off := t.Offset + int64(i0*size)
	if _, err := w.files[t.File].ReadAt(raw, off); err != nil {
		return &convert.InputError{File: t.File, Tensor: t.Name, Offset: off, Err: fmt.Errorf("%w: %w", convert.ErrTruncated, err)}
	}
	// DecodeWeights decodes (BF16 by the vector kernel) and reports the
	// first NaN or infinity with its byte offset, here of this block
	block := *t
	block.Offset = off
	return block.DecodeWeights(raw, dst)
}

func (w *SourceWeights) Vector(name string) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	n := int(t.NumElements())
	v := make([]float32, n)
	return v, w.read(t, 0, n, v)
}

func (w *SourceWeights) Rows(name string, ids []int32) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	rows, cols, ok := matrixDims(t.Shape)
	if !ok {
		return nil, fmt.Errorf("%w: tensor %q has shape %v, not a matrix", ErrLayout, name, t.Shape)
	}
	out := make([]float32, len(ids)*cols)
	for i, id := range ids {
		if int(id) < 0 || int(id) >= rows {
			return nil, fmt.Errorf("%w: token id %d outside %q's %d rows", ErrTokens, id, name, rows)
		}
		if err := w.read(t, int(id)*cols, (int(id)+1)*cols, out[i*cols:(i+1)*cols]); err != nil {
			return nil, err
		}
	}
	return out, nil
}

func (w *SourceWeights) Linear(name string, x []float32, ntok int) ([]float32, error) {
	t, err := w.tensor(name)
	if err != nil {
		return nil, err
	}
	rows, cols, ok := matrixDims(t.Shape)
	if !ok || len(x) != ntok*cols {
		return nil, fmt.Errorf("%w: tensor %q of shape %v times %d activations of %d tokens", ErrLayout, name, t.Shape, len(x), ntok)
	}
	return floatLinear(rows, cols, func(r0, r1 int, dst []float32) error {
		return w.read(t, r0*cols, r1*cols, dst)
	}, x, ntok)
}
