// Package probe runs a reference forward pass of a decoder-only language
// model, from a packed artifact in the arithmetic a ternary runtime uses
// and from its float source checkpoint, on the same probe tokens, and
// compares the two layer by layer and on the logits. It is a behaviour
// smoke test for a release gate, not an evaluation.
//
// The layout is the decoder most open checkpoints use (common practice):
//
//	model.embed_tokens.weight                       [vocab, hidden]
//	model.layers.N.input_layernorm.weight           [hidden]
//	model.layers.N.self_attn.{q,k,v}_proj.weight    [heads·head_dim | kv_heads·head_dim, hidden]
//	model.layers.N.self_attn.{q,k,v}_proj.bias      optional
//	model.layers.N.self_attn.inner_norm.weight      optional, [heads·head_dim]: RMSNorm before o_proj
//	model.layers.N.self_attn.o_proj.weight          [hidden, heads·head_dim]
//	model.layers.N.post_attention_layernorm.weight  [hidden]
//	model.layers.N.mlp.{gate,up}_proj.weight        [intermediate, hidden]
//	model.layers.N.mlp.inner_norm.weight            optional, [intermediate]: RMSNorm before down_proj
//	model.layers.N.mlp.down_proj.weight             [hidden, intermediate]
//	model.norm.weight                               [hidden]
//	lm_head.weight                                  [vocab, hidden]; absent with tied embeddings
//
// The two inner_norm tensors are this package's names for the extra
// RMSNorms some ternary-trained models put before their output
// projections. Integer and BOOL tensors (a step counter, say) are not
// weights and are ignored; any float tensor outside the layout is an
// error.
package probe

import (
	"errors"
	"fmt"
	"slices"
	"strings"

	"ternkit/modelconfig"
)

// ErrLayout reports a config this package cannot run or tensors it cannot
// place; the message lists what it expected.
var ErrLayout = errors.New("model layout")

// Defaults for keys a config may leave out (common practice in open
// checkpoints; the values are from memory).
const (
	DefaultRopeTheta  = 10000.0
	DefaultRMSNormEps = 1e-6
	DefaultHiddenAct  = "silu"
)

// Acts are the MLP activations the probe runs (config key hidden_act).
// gelu is computed in its tanh form whatever the name says.
var Acts = []string{"silu", "gelu", "gelu_tanh", "gelu_pytorch_tanh", "relu2"}

// Arch is a model config checked for running.
type Arch struct {
	Hidden, Inter, Layers, Heads, KVHeads, HeadDim, Vocab int
	MaxPos                                                int // 0: no limit
	Theta, Eps                                            float64
	Act                                                   string
	Tied                                                  bool
}

// NewArch checks a config: every width the forward pass needs, heads
// divisible by KV heads, an even head dim, a known activation.
func NewArch(c *modelconfig.Config) (*Arch, error) {
	a := &Arch{
		Hidden: int(c.HiddenSize), Inter: int(c.IntermediateSize), Layers: int(c.NumHiddenLayers),
		Heads: int(c.NumAttentionHeads), KVHeads: int(c.NumKeyValueHeads), HeadDim: int(c.HeadDim),
		Vocab: int(c.VocabSize), MaxPos: int(c.MaxPositionEmbeddings),
		Theta: c.RopeTheta, Eps: c.RMSNormEps, Act: c.HiddenAct, Tied: c.TieWordEmbeddings,
	}
	if a.Theta == 0 {
		a.Theta = DefaultRopeTheta
	}
	if a.Eps == 0 {
		a.Eps = DefaultRMSNormEps
	}
	if a.Act == "" {
		a.Act = DefaultHiddenAct
	}
	var missing []string
	for _, k := range []struct {
		key string
		v   int
	}{{"hidden_size", a.Hidden}, {"intermediate_size", a.Inter}, {"num_hidden_layers", a.Layers},
		{"num_attention_heads", a.Heads}, {"num_key_value_heads", a.KVHeads}, {"head_dim", a.HeadDim}, {"vocab_size", a.Vocab}} {
		if k.v <= 0 || k.v > 1<<24 {
			missing = append(missing, fmt.Sprintf("%s (%d)", k.key, k.v))
		}
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("%w: config needs positive %s (at most 2^24)", ErrLayout, strings.Join(missing, ", "))
	}
	if a.Heads%a.KVHeads != 0 {
		return nil, fmt.Errorf("%w: num_attention_heads %d is not a multiple of num_key_value_heads %d", ErrLayout, a.Heads, a.KVHeads)
	}
	if a.HeadDim%2 != 0 {
		return nil, fmt.Errorf("%w: head_dim %d is odd; rotary embedding pairs dim i with i + head_dim/2", ErrLayout, a.HeadDim)
	}
	if !slices.Contains(Acts, a.Act) {
		return nil, fmt.Errorf("%w: hidden_act %q (this probe runs %s)", ErrLayout, a.Act, strings.Join(Acts, ", "))
	}
	return a, nil
}

// Layer tensor names, after "model.layers.N.".
const (
	nameInNorm   = "input_layernorm.weight"
	namePostNorm = "post_attention_layernorm.weight"
	nameQ        = "self_attn.q_proj.weight"
	nameK        = "self_attn.k_proj.weight"
	nameV        = "self_attn.v_proj.weight"
	nameO        = "self_attn.o_proj.weight"
	nameQBias    = "self_attn.q_proj.bias"
	nameKBias    = "self_attn.k_proj.bias"
	nameVBias    = "self_attn.v_proj.bias"
	nameAttnNorm = "self_attn.inner_norm.weight"
	nameGate     = "mlp.gate_proj.weight"
	nameUp       = "mlp.up_proj.weight"
	nameDown     = "mlp.down_proj.weight"
	nameMLPNorm  = "mlp.inner_norm.weight"

	NameEmbed = "model.embed_tokens.weight"
	NameNorm  = "model.norm.weight"
	NameHead  = "lm_head.weight"
)

func layerName(l int, s string) string { return fmt.Sprintf("model.layers.%d.%s", l, s) }

// expected returns every tensor the layout places, with its shape and
// whether it is required.
func (a *Arch) expected() map[string]struct {
	shape    []int64
	required bool
} {
	type ent = struct {
		shape    []int64
		required bool
	}
	h, q, kv, f := int64(a.Hidden), int64(a.Heads*a.HeadDim), int64(a.KVHeads*a.HeadDim), int64(a.Inter)
	m := map[string]ent{
		NameEmbed: {[]int64{int64(a.Vocab), h}, true},
		NameNorm:  {[]int64{h}, true},
		NameHead:  {[]int64{int64(a.Vocab), h}, !a.Tied},
	}
	for l := range a.Layers {
		for name, e := range map[string]ent{
			nameInNorm: {[]int64{h}, true}, namePostNorm: {[]int64{h}, true},
			nameQ: {[]int64{q, h}, true}, nameK: {[]int64{kv, h}, true}, nameV: {[]int64{kv, h}, true},
			nameO: {[]int64{h, q}, true}, nameQBias: {[]int64{q}, false}, nameKBias: {[]int64{kv}, false},
			nameVBias: {[]int64{kv}, false}, nameAttnNorm: {[]int64{q}, false},
			nameGate: {[]int64{f, h}, true}, nameUp: {[]int64{f, h}, true}, nameDown: {[]int64{h, f}, true},
			nameMLPNorm: {[]int64{f}, false},
		} {
			m[layerName(l, name)] = e
		}
	}
	return m
}

// Place checks that the weights hold every required tensor with its
// shape, and nothing else among their float tensors.
func (a *Arch) Place(w Weights) error {
	exp := a.expected()
	var problems []string
	for _, name := range w.FloatNames() {
		e, ok := exp[name]
		if !ok {
			problems = append(problems, fmt.Sprintf("float tensor %q has no place in the layout", name))
			continue
		}
		shape, _ := w.Shape(name)
		if !slices.Equal(shape, e.shape) {
			problems = append(problems, fmt.Sprintf("tensor %q has shape %v, the config gives %v", name, shape, e.shape))
		}
	}
	names := make([]string, 0, len(exp))
	for name, e := range exp {
		if _, ok := w.Shape(name); !ok && e.required {
			names = append(names, name)
		}
	}
	slices.Sort(names)
	for _, name := range names {
		problems = append(problems, fmt.Sprintf("tensor %q is missing", name))
	}
	if len(problems) == 0 {
		return nil
	}
	if len(problems) > 8 {
		problems = append(problems[:8], fmt.Sprintf("and %d more", len(problems)-8))
	}
	return fmt.Errorf("%w: %s: %s; expected model.embed_tokens.weight, model.layers.0..%d.{input_layernorm, "+
		"self_attn.{q,k,v,o}_proj (biases and self_attn.inner_norm optional), post_attention_layernorm, "+
		"mlp.{gate,up,down}_proj (mlp.inner_norm optional)}, model.norm.weight and lm_head.weight (absent when "+
		"tie_word_embeddings is true); integer and BOOL tensors are ignored", ErrLayout, w.Name(), strings.Join(problems, "; "), a.Layers-1)
}
