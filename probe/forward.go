package probe

import (
	"errors"
	"fmt"
	"math"
)

// ErrTokens reports probe tokens the model cannot take.
var ErrTokens = errors.New("probe tokens")

// State is one model's forward pass over a batch of sequences, run a layer
// at a time: X is the residual stream, one row of Hidden values per token,
// the sequences one after another.
type State struct {
	arch *Arch
	w    Weights
	seqs [][]int32
	X    []float32
	N    int // tokens
	next int // the next layer
}

// Start embeds the sequences' tokens.
func Start(a *Arch, w Weights, seqs [][]int32) (*State, error) {
	var ids []int32
	for i, s := range seqs {
		if len(s) == 0 {
			return nil, fmt.Errorf("%w: sequence %d is empty", ErrTokens, i)
		}
		if a.MaxPos > 0 && len(s) > a.MaxPos {
			return nil, fmt.Errorf("%w: sequence %d has %d tokens, above max_position_embeddings %d", ErrTokens, i, len(s), a.MaxPos)
		}
		for j, id := range s {
			if id < 0 || int(id) >= a.Vocab {
				return nil, fmt.Errorf("%w: sequence %d token %d is id %d, outside the vocabulary 0..%d", ErrTokens, i, j, id, a.Vocab-1)
			}
		}
		ids = append(ids, s...)
	}
	x, err := w.Rows(NameEmbed, ids)
	if err != nil {
		return nil, err
	}
	return &State{arch: a, w: w, seqs: seqs, X: x, N: len(ids)}, nil
}

// RMSNorm normalizes each row of width len(g) in place:
// x / sqrt(mean(x²) + eps) · g, the mean in float64 (Zhang & Sennrich 2019).
func RMSNorm(x, g []float32, eps float64) {
	d := len(g)
	for t := 0; t+d <= len(x); t += d {
		row := x[t : t+d]
		var ss float64
		for _, v := range row {
			ss += float64(v) * float64(v)
		}
		inv := float32(1 / math.Sqrt(ss/float64(d)+eps))
		for i, v := range row {
			row[i] = v * inv * g[i]
		}
	}
}

// Rope rotates one head's vector at position pos in place: dim i pairs
// with dim i + d/2 ("rotate half", common practice in open checkpoints),
// rotated by the angle pos · theta^(−2i/d) (Su et al. 2021), the angle in
// float64.
func Rope(v []float32, pos int, theta float64) {
	half := len(v) / 2
	for i := range half {
		ang := float64(pos) * math.Pow(theta, -2*float64(i)/float64(len(v)))
		c, s := float32(math.Cos(ang)), float32(math.Sin(ang))
		a, b := v[i], v[i+half]
		v[i] = a*c - b*s
		v[i+half] = b*c + a*s
	}
}

// Act applies the MLP activation in place.
func Act(name string, x []float32) {
	for i, v := range x {
		f := float64(v)
		switch name {
		case "silu":
			f = f / (1 + math.Exp(-f))
		case "relu2":
			f = max(f, 0)
			f *= f
		default: // gelu, tanh form
			f = 0.5 * f * (1 + math.Tanh(math.Sqrt(2/math.Pi)*(f+0.044715*f*f*f)))
		}
		x[i] = float32(f)
	}
}

func (st *State) linear(name string, x []float32) ([]float32, error) {
	return st.w.Linear(name, x, st.N)
}

// addBias adds an optional bias to each row of y.
func (st *State) addBias(name string, y []float32) error {
	if _, ok := st.w.Shape(name); !ok {
		return nil
	}
	b, err := st.w.Vector(name)
	if err != nil {
		return err
	}
	for t := 0; t < len(y); t += len(b) {
		for i, v := range b {
			y[t+i] += v
		}
	}
	return nil
}

// optionalNorm applies an optional RMSNorm.
func (st *State) optionalNorm(name string, x []float32) error {
	if _, ok := st.w.Shape(name); !ok {
		return nil
	}
	g, err := st.w.Vector(name)
	if err != nil {
		return err
	}
	RMSNorm(x, g, st.arch.Eps)
	return nil
}

func (st *State) norm(name string, x []float32) ([]float32, error) {
	g, err := st.w.Vector(name)
	if err != nil {
		return nil, err
	}
	h := append([]float32(nil), x...)
	RMSNorm(h, g, st.arch.Eps)
	return h, nil
}

// Layer runs the next decoder layer on the residual stream.
func (st *State) Layer() error {
	a, l := st.arch, st.next
	if l >= a.Layers {
		return fmt.Errorf("no layer %d: the model has %d", l, a.Layers)
	}
	st.next++
	name := func(s string) string { return layerName(l, s) }
	h, err := st.norm(name(nameInNorm), st.X)
	if err != nil {
		return err
	}
	var qkv [3][]float32
	for i, n := range [3][2]string{{nameQ, nameQBias}, {nameK, nameKBias}, {nameV, nameVBias}} {
		if qkv[i], err = st.linear(name(n[0]), h); err != nil {
			return err
		}
		if err := st.addBias(name(n[1]), qkv[i]); err != nil {
			return err
		}
	}
	attn := st.attention(qkv[0], qkv[1], qkv[2])
	if err := st.optionalNorm(name(nameAttnNorm), attn); err != nil {
		return err
	}
	o, err := st.linear(name(nameO), attn)
	if err != nil {
		return err
	}
	for i, v := range o {
		st.X[i] += v
	}
	if h, err = st.norm(name(namePostNorm), st.X); err != nil {
		return err
	}
	gate, err := st.linear(name(nameGate), h)
	if err != nil {
		return err
	}
	up, err := st.linear(name(nameUp), h)
	if err != nil {
		return err
	}
	Act(a.Act, gate)
	for i, v := range up {
		gate[i] *= v
	}
	if err := st.optionalNorm(name(nameMLPNorm), gate); err != nil {
		return err
	}
	down, err := st.linear(name(nameDown), gate)
	if err != nil {
		return err
	}
	for i, v := range down {
		st.X[i] += v
	}
	return nil
}

// attention is causal softmax attention per sequence with rotary
// positions and grouped-query heads: head h reads KV head h / (heads /
// kv_heads); scores are q·k / sqrt(head_dim), softmax in float64.
func (st *State) attention(q, k, v []float32) []float32 {
	a := st.arch
	d, qw, kw := a.HeadDim, a.Heads*a.HeadDim, a.KVHeads*a.HeadDim
	out := make([]float32, st.N*qw)
	group := a.Heads / a.KVHeads
	scale := 1 / math.Sqrt(float64(d))
	start := 0
	for _, s := range st.seqs {
		for p := range s {
			t := start + p
			for h := range a.Heads {
				Rope(q[t*qw+h*d:t*qw+(h+1)*d], p, a.Theta)
			}
			for h := range a.KVHeads {
				Rope(k[t*kw+h*d:t*kw+(h+1)*d], p, a.Theta)
			}
		}
		scores := make([]float64, len(s))
		for p := range s {
			t := start + p
			for h := range a.Heads {
				qh := q[t*qw+h*d : t*qw+(h+1)*d]
				kv := h / group
				top := math.Inf(-1)
				for j := 0; j <= p; j++ {
					kh := k[(start+j)*kw+kv*d : (start+j)*kw+(kv+1)*d]
					var dot float64
					for i := range d {
						dot += float64(qh[i]) * float64(kh[i])
					}
					scores[j] = dot * scale
					top = max(top, scores[j])
				}
				var sum float64
				for j := 0; j <= p; j++ {
					scores[j] = math.Exp(scores[j] - top)
					sum += scores[j]
				}
				o := out[t*qw+h*d : t*qw+(h+1)*d]
				acc := make([]float64, d)
				for j := 0; j <= p; j++ {
					vh := v[(start+j)*kw+kv*d : (start+j)*kw+(kv+1)*d]
					wj := scores[j] / sum
					for i := range d {
						acc[i] += wj * float64(vh[i])
					}
				}
				for i := range d {
					o[i] = float32(acc[i])
				}
			}
		}
		start += len(s)
	}
	return out
}

// Logits applies the final norm and the output head (or the tied
// embedding) after the last layer: one row of Vocab logits per token.
func (st *State) Logits() ([]float32, error) {
	if st.next != st.arch.Layers {
		return nil, fmt.Errorf("logits after %d of %d layers", st.next, st.arch.Layers)
	}
	h, err := st.norm(NameNorm, st.X)
	if err != nil {
		return nil, err
	}
	head := NameHead
	if _, ok := st.w.Shape(NameHead); !ok {
		head = NameEmbed // tied: Place required lm_head otherwise
	}
	return st.linear(head, h)
}
