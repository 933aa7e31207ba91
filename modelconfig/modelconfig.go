// Package modelconfig reads the model config that decoder-only checkpoints
// commonly ship beside their weights (config.json): the architecture's
// widths, layer and head counts, vocabulary, rotary and norm settings.
//
// The keys and their defaults are common practice in open checkpoints:
// num_key_value_heads absent means one KV head per attention head, and
// head_dim absent means hidden_size / num_attention_heads.
package modelconfig

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// MaxSize is the largest config this package reads: configs are a few KiB.
const MaxSize = 1 << 20

// ErrNotModelConfig reports JSON that is not a model config of the layout
// this package knows (none of its architecture keys is present).
var ErrNotModelConfig = errors.New("not a model config of the decoder layout")

// Config is the architecture a model config describes. Fields a file does
// not give are zero, except the documented defaults.
type Config struct {
	HiddenSize            int64   `json:"hidden_size"`
	IntermediateSize      int64   `json:"intermediate_size"`
	NumHiddenLayers       int64   `json:"num_hidden_layers"`
	NumAttentionHeads     int64   `json:"num_attention_heads"`
	NumKeyValueHeads      int64   `json:"num_key_value_heads"`
	HeadDim               int64   `json:"head_dim"`
	VocabSize             int64   `json:"vocab_size"`
	MaxPositionEmbeddings int64   `json:"max_position_embeddings"`
	RopeTheta             float64 `json:"rope_theta"`
	RMSNormEps            float64 `json:"rms_norm_eps"`
	TieWordEmbeddings     bool    `json:"tie_word_embeddings"`
	HiddenAct             string  `json:"hidden_act"`
	ModelType             string  `json:"model_type,omitempty"`

	// Given lists the keys above that the file sets (defaults excluded), in
	// the order of Keys.
	Given []string `json:"-"`
}

// Keys are the architecture keys this package reads, in display order.
var Keys = []string{
	"hidden_size", "intermediate_size", "num_hidden_layers", "num_attention_heads",
	"num_key_value_heads", "head_dim", "vocab_size", "max_position_embeddings",
	"rope_theta", "rms_norm_eps", "tie_word_embeddings", "hidden_act",
}

// Parse reads a model config. name is used in error messages (a file name).
// It returns ErrNotModelConfig (wrapped) for JSON objects that set none of
// the architecture keys, and an error naming the key for a value of the
// wrong type or out of range.
func Parse(name string, data []byte) (*Config, error) {
	if len(data) > MaxSize {
		return nil, fmt.Errorf("%s: config is %d bytes, above the %d-byte limit", name, len(data), MaxSize)
	}
	var raw map[string]json.RawMessage
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	if err := dec.Decode(&raw); err != nil {
		return nil, fmt.Errorf("%s: not a JSON object: %w", name, err)
	}
	if raw == nil {
		return nil, fmt.Errorf("%s: %w", name, ErrNotModelConfig)
	}
	c := &Config{}
	ints := map[string]*int64{
		"hidden_size": &c.HiddenSize, "intermediate_size": &c.IntermediateSize,
		"num_hidden_layers": &c.NumHiddenLayers, "num_attention_heads": &c.NumAttentionHeads,
		"num_key_value_heads": &c.NumKeyValueHeads, "head_dim": &c.HeadDim,
		"vocab_size": &c.VocabSize, "max_position_embeddings": &c.MaxPositionEmbeddings,
	}
	floats := map[string]*float64{"rope_theta": &c.RopeTheta, "rms_norm_eps": &c.RMSNormEps}
	for _, key := range Keys {
		v, ok := raw[key]
		if !ok || string(v) == "null" {
			continue
		}
		c.Given = append(c.Given, key)
		switch {
		case ints[key] != nil:
			n, err := number(v)
			if err != nil {
				return nil, fmt.Errorf("%s: %q is %s, not a number", name, key, v)
			}
			i, err := strconv.ParseInt(string(n), 10, 64)
			if err != nil || i < 0 {
				return nil, fmt.Errorf("%s: %q is %s, not a non-negative integer", name, key, n)
			}
			*ints[key] = i
		case floats[key] != nil:
			n, err := number(v)
			if err != nil {
				return nil, fmt.Errorf("%s: %q is %s, not a number", name, key, v)
			}
			f, err := n.Float64()
			if err != nil || f < 0 || math.IsInf(f, 0) {
				return nil, fmt.Errorf("%s: %q is %s, not a finite non-negative number", name, key, n)
			}
			*floats[key] = f
		case key == "tie_word_embeddings":
			if err := json.Unmarshal(v, &c.TieWordEmbeddings); err != nil {
				return nil, fmt.Errorf("%s: %q is %s, not true or false", name, key, v)
			}
		case key == "hidden_act":
			if err := json.Unmarshal(v, &c.HiddenAct); err != nil {
				return nil, fmt.Errorf("%s: %q is %s, not a string", name, key, v)
			}
		}
	}
	if v, ok := raw["model_type"]; ok {
		_ = json.Unmarshal(v, &c.ModelType) // shown only; any other type is ignored
	}
	if len(c.Given) == 0 {
		return nil, fmt.Errorf("%s: %w", name, ErrNotModelConfig)
	}
	if c.NumKeyValueHeads == 0 {
		c.NumKeyValueHeads = c.NumAttentionHeads
	}
	if c.HeadDim == 0 && c.NumAttentionHeads > 0 && c.HiddenSize%c.NumAttentionHeads == 0 {
		c.HeadDim = c.HiddenSize / c.NumAttentionHeads
	}
	return c, nil
}

// Has reports whether the file set key (one of Keys).
func (c *Config) Has(key string) bool {
	for _, k := range c.Given {
		if k == key {
			return true
		}
	}
	return false
}

// number returns a JSON number's text; a string holding digits is not one.
func number(v json.RawMessage) (json.Number, error) {
	var n json.Number
	if len(v) == 0 || v[0] == '"' {
		return "", errors.New("not a number")
	}
	err := json.Unmarshal(v, &n)
	return n, err
}

// Summary describes the architecture in one line, from the keys the file
// gives (and the defaults they imply), e.g. "4 layers, hidden 256, MLP 768,
// 4 heads (2 KV) × 64, vocabulary 2048, context 512, rope theta 10000, norm
// eps 1e-05, silu, untied output head".
func (c *Config) Summary() string {
	var parts []string
	add := func(key, format string, args ...any) {
		if c.Has(key) {
			parts = append(parts, fmt.Sprintf(format, args...))
		}
	}
	if c.ModelType != "" {
		parts = append(parts, c.ModelType)
	}
	add("num_hidden_layers", "%d layers", c.NumHiddenLayers)
	add("hidden_size", "hidden %d", c.HiddenSize)
	add("intermediate_size", "MLP %d", c.IntermediateSize)
	if c.Has("num_attention_heads") {
		h := fmt.Sprintf("%d heads", c.NumAttentionHeads)
		if c.NumKeyValueHeads != c.NumAttentionHeads {
			h += fmt.Sprintf(" (%d KV)", c.NumKeyValueHeads)
		}
		if c.HeadDim > 0 {
			h += fmt.Sprintf(" × %d", c.HeadDim)
		}
		parts = append(parts, h)
	}
	add("vocab_size", "vocabulary %d", c.VocabSize)
	add("max_position_embeddings", "context %d", c.MaxPositionEmbeddings)
	add("rope_theta", "rope theta %g", c.RopeTheta)
	add("rms_norm_eps", "norm eps %g", c.RMSNormEps)
	add("hidden_act", "%s", c.HiddenAct)
	if c.Has("tie_word_embeddings") {
		if c.TieWordEmbeddings {
			parts = append(parts, "output head tied to the embeddings")
		} else {
			parts = append(parts, "untied output head")
		}
	}
	return strings.Join(parts, ", ")
}
