package modelconfig

import (
	"testing"
)

// Any bytes: Parse returns a config or an error, never panics; a config's
// summary and cross-check with a decoder's tensors never panic either, and
// a config within MaxSize that parses sets at least one architecture key.
func FuzzParse(f *testing.F) {
	f.Add([]byte(goodConfig))
	f.Add([]byte(`{"hidden_size": 256, "num_attention_heads": 0}`))
	f.Add([]byte(`{"vocab_size": 1e3}`))
	f.Add([]byte(`{"tie_word_embeddings": "yes"}`))
	f.Add([]byte(`[]`))
	f.Add([]byte(`null`))
	tensors := decoder(12, 8, 2, 2, 1, 4, 16, true)
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse("config.json", data)
		if err != nil {
			return
		}
		if len(c.Given) == 0 {
			t.Fatalf("a config without architecture keys parsed: %q", data)
		}
		_ = c.Summary()
		_ = c.Check(tensors)
	})
}
