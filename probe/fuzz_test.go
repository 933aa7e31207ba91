package probe

import (
	"bytes"
	"errors"
	"testing"
)

// FuzzParseTokens: any input gives sequences or an ErrTokens error, never
// a panic; every id parsed is non-negative.
func FuzzParseTokens(f *testing.F) {
	f.Add([]byte("1 2 3\n# c\n4,5\n"))
	f.Add([]byte("\n\n"))
	f.Add([]byte("99999999999\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		seqs, err := ParseTokens("f", bytes.NewReader(data))
		if err != nil {
			if !errors.Is(err, ErrTokens) {
				t.Fatalf("error without ErrTokens: %v", err)
			}
			return
		}
		for _, s := range seqs {
			for _, id := range s {
				if id < 0 {
					t.Fatalf("negative id %d", id)
				}
			}
		}
	})
}

// FuzzParseGolden: any input parses or is refused; what parses marshals
// and parses back to the same outputs.
func FuzzParseGolden(f *testing.F) {
	g := &Golden{Format: GoldenFormat, Version: 1, Activations: ActInt8, TopK: 1, Tokens: [][]int32{{1, 2}},
		Positions: [][]Outputs{{{IDs: []int32{3}, Logits: []float32{0.5}}, {IDs: []int32{4}, Logits: []float32{-1}}}}}
	seed, _ := g.Marshal()
	f.Add(seed)
	f.Add([]byte(`{"format":"ternkit-probe-golden"}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		g, err := ParseGolden("f", data)
		if err != nil {
			return
		}
		again, err := g.Marshal()
		if err != nil {
			t.Fatal(err)
		}
		g2, err := ParseGolden("again", again)
		if err != nil {
			t.Fatalf("a parsed golden file does not parse back: %v", err)
		}
		if len(g2.Positions) != len(g.Positions) || g2.TopK != g.TopK {
			t.Fatal("round trip changed the file")
		}
		// checking never panics, whatever the ids
		logits := make([]float32, 0)
		for _, s := range g.Tokens {
			logits = append(logits, make([]float32, 8*len(s))...)
		}
		g.Check(logits, 8)
	})
}
