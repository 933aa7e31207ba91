package modelconfig

import (
	"fmt"
	"math"
	"math/big"
	"math/bits"
	"regexp"
	"strconv"
)

// Tensor is a tensor's name and shape, as the cross-check needs them.
type Tensor struct {
	Name  string
	Shape []int64
}

// Mismatch is a config key whose value the tensors contradict.
type Mismatch struct {
	Key    string // the config key (or keys, as "num_attention_heads × head_dim")
	Tensor string // the first tensor that contradicts it
	Config string // the value the config gives
	Found  string // what the tensor has
	More   int    // further tensors contradicting the same key
}

func (m Mismatch) String() string {
	s := fmt.Sprintf("config %s = %s, but tensor %q has %s", m.Key, m.Config, m.Tensor, m.Found)
	if m.More > 0 {
		s += fmt.Sprintf(" (and %d more tensors)", m.More)
	}
	return s
}

// The common decoder layout's tensor names (common practice in open
// decoder-only checkpoints).
const (
	EmbedName = "model.embed_tokens.weight"
	HeadName  = "lm_head.weight"
)

var layerName = regexp.MustCompile(`^model\.layers\.(0|[1-9][0-9]{0,8})\.(self_attn\.(q|k|v|o)_proj|mlp\.(gate|up|down)_proj)\.weight$`)

// KnownLayout reports whether the tensors are named in the common decoder
// layout (an embedding model.embed_tokens.weight and layers
// model.layers.N....): only then does Check compare them with a config.
func KnownLayout(tensors []Tensor) bool {
	for _, t := range tensors {
		if t.Name == EmbedName || layerName.MatchString(t.Name) {
			return true
		}
	}
	return false
}

// Check compares the config with the tensors of the common decoder layout:
// embedding rows = vocab_size, embedding columns = hidden_size, layers =
// the highest layer index + 1, attention projections = heads × head_dim
// (queries, output) and KV heads × head_dim (keys, values) by hidden_size,
// MLP projections = intermediate_size by hidden_size, and an output head
// (vocab_size rows) unless the embeddings are tied. Keys the config does
// not give are not checked. One Mismatch per key, naming the first tensor
// in the order given. Tensors of another layout give no mismatch; see
// KnownLayout.
func (c *Config) Check(tensors []Tensor) []Mismatch {
	var out []Mismatch
	byKey := map[string]int{}
	add := func(key, tensor string, config, found string) {
		if i, ok := byKey[key]; ok {
			out[i].More++
			return
		}
		byKey[key] = len(out)
		out = append(out, Mismatch{Key: key, Tensor: tensor, Config: config, Found: found})
	}
	// a product is compared as a claim: one beyond int64 matches no tensor
	type claim struct {
		v    int64 // 0: not claimed; -1: beyond int64
		text string
	}
	product := func(a, b int64) claim {
		if hi, lo := bits.Mul64(uint64(a), uint64(b)); hi != 0 || lo > math.MaxInt64 {
			return claim{-1, new(big.Int).Mul(big.NewInt(a), big.NewInt(b)).String()}
		}
		return claim{a * b, strconv.FormatInt(a*b, 10)}
	}
	dimClaim := func(key string, want claim, t Tensor, axis int, what string) {
		if want.v == 0 || len(t.Shape) != 2 {
			return
		}
		if got := t.Shape[axis]; got != want.v {
			add(key, t.Name, want.text, fmt.Sprintf("%d %s", got, what))
		}
	}
	dim := func(key string, want int64, t Tensor, axis int, what string) {
		dimClaim(key, claim{want, strconv.FormatInt(want, 10)}, t, axis, what)
	}
	q := product(c.NumAttentionHeads, c.HeadDim)
	kv := product(c.NumKeyValueHeads, c.HeadDim)
	qKey, kvKey := "num_attention_heads × head_dim", "num_key_value_heads × head_dim"
	if !c.Has("head_dim") {
		qKey, kvKey = "num_attention_heads × (hidden_size / num_attention_heads)", "num_key_value_heads × (hidden_size / num_attention_heads)"
	}
	if !c.Has("num_key_value_heads") {
		kv = claim{} // the default, one KV head per head, is not a claim worth a warning
	}
	highest, head := int64(-1), false
	for _, t := range tensors {
		switch t.Name {
		case EmbedName:
			dim("vocab_size", c.VocabSize, t, 0, "rows")
			dim("hidden_size", c.HiddenSize, t, 1, "columns")
			continue
		case HeadName:
			head = true
			dim("vocab_size", c.VocabSize, t, 0, "rows")
			dim("hidden_size", c.HiddenSize, t, 1, "columns")
			continue
		}
		m := layerName.FindStringSubmatch(t.Name)
		if m == nil {
			continue
		}
		n, _ := strconv.ParseInt(m[1], 10, 64)
		highest = max(highest, n)
		switch m[3] + m[4] {
		case "q":
			dimClaim(qKey, q, t, 0, "rows")
			if h := c.NumAttentionHeads; h > 0 && !c.Has("head_dim") && len(t.Shape) == 2 && t.Shape[0]%h != 0 {
				// no head_dim to derive (hidden_size is not a multiple of the
				// heads, or absent): the query rows still split into heads
				add("num_attention_heads", t.Name, strconv.FormatInt(h, 10), fmt.Sprintf("%d rows, not a multiple of it", t.Shape[0]))
			}
			dim("hidden_size", c.HiddenSize, t, 1, "columns")
		case "k", "v":
			dimClaim(kvKey, kv, t, 0, "rows")
			dim("hidden_size", c.HiddenSize, t, 1, "columns")
		case "o":
			dim("hidden_size", c.HiddenSize, t, 0, "rows")
			dimClaim(qKey, q, t, 1, "columns")
		case "gate", "up":
			dim("intermediate_size", c.IntermediateSize, t, 0, "rows")
			dim("hidden_size", c.HiddenSize, t, 1, "columns")
		case "down":
			dim("hidden_size", c.HiddenSize, t, 0, "rows")
			dim("intermediate_size", c.IntermediateSize, t, 1, "columns")
		}
	}
	if c.Has("num_hidden_layers") && highest >= 0 && highest+1 != c.NumHiddenLayers {
		add("num_hidden_layers", fmt.Sprintf("model.layers.%d.*", highest), strconv.FormatInt(c.NumHiddenLayers, 10),
			fmt.Sprintf("the highest layer index %d (%d layers)", highest, highest+1))
	}
	if !c.TieWordEmbeddings && !head && KnownLayout(tensors) {
		add("tie_word_embeddings", HeadName, "false", "no such tensor (an untied model needs its output head)")
	}
	return out
}
