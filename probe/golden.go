package probe

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
)

// GoldenFormat names the golden file format.
const GoldenFormat = "ternkit-probe-golden"

// ErrGolden reports a golden check that failed (the outputs differ).
var ErrGolden = errors.New("golden outputs differ")

// Golden holds an artifact's outputs on probe tokens, for runtimes to
// check themselves against (README, "Golden outputs").
type Golden struct {
	Format         string      `json:"format"`
	Version        int         `json:"version"`
	ArtifactBLAKE3 string      `json:"artifact_manifest_blake3"`
	ConfigBLAKE3   string      `json:"config_blake3"`
	Activations    string      `json:"activations"`
	TopK           int         `json:"top_k"`
	Tolerance      Tolerance   `json:"tolerance"`
	Tokens         [][]int32   `json:"tokens"`
	Positions      [][]Outputs `json:"positions"`
}

// Tolerance: a recomputed logit b matches a recorded a when
// |a − b| ≤ abs + rel·|a|.
type Tolerance struct {
	Abs float64 `json:"abs"`
	Rel float64 `json:"rel"`
}

func (t Tolerance) ok(want, got float64) bool {
	return math.Abs(want-got) <= t.Abs+t.Rel*math.Abs(want)
}

// Outputs of one position: the top-k token ids, largest logit first, and
// their logits.
type Outputs struct {
	IDs    []int32   `json:"ids"`
	Logits []float32 `json:"logits"`
}

// NewGolden records a probe's artifact logits.
func NewGolden(res *Result, seqs [][]int32, vocab, k int, tol Tolerance, artifactHash, configHash string) *Golden {
	g := &Golden{Format: GoldenFormat, Version: 1, ArtifactBLAKE3: artifactHash, ConfigBLAKE3: configHash,
		Activations: res.Activations, TopK: k, Tolerance: tol, Tokens: seqs}
	t := 0
	for _, s := range seqs {
		var row []Outputs
		for range s {
			z := res.Logits[t*vocab : (t+1)*vocab]
			o := Outputs{IDs: TopK(z, k)}
			for _, id := range o.IDs {
				o.Logits = append(o.Logits, z[id])
			}
			row = append(row, o)
			t++
		}
		g.Positions = append(g.Positions, row)
	}
	return g
}

// ParseGolden reads a golden file strictly: known keys, the format and
// version, one output per token with k ids in the vocabulary.
func ParseGolden(name string, data []byte) (*Golden, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var g Golden
	if err := dec.Decode(&g); err != nil {
		return nil, fmt.Errorf("%s: not a golden file: %w", name, err)
	}
	if g.Format != GoldenFormat || g.Version != 1 {
		return nil, fmt.Errorf("%s: format %q version %d (want %q version 1)", name, g.Format, g.Version, GoldenFormat)
	}
	if g.Activations != ActInt8 && g.Activations != ActFloat {
		return nil, fmt.Errorf("%s: activations %q (valid: int8, float)", name, g.Activations)
	}
	if g.TopK < 1 || len(g.Tokens) == 0 || len(g.Positions) != len(g.Tokens) {
		return nil, fmt.Errorf("%s: top_k %d, %d sequences of tokens and %d of positions", name, g.TopK, len(g.Tokens), len(g.Positions))
	}
	if !(g.Tolerance.Abs >= 0 && g.Tolerance.Rel >= 0) || math.IsInf(g.Tolerance.Abs, 0) || math.IsInf(g.Tolerance.Rel, 0) {
		return nil, fmt.Errorf("%s: tolerance %+v (want finite values ≥ 0)", name, g.Tolerance)
	}
	for i, s := range g.Tokens {
		if len(s) == 0 || len(g.Positions[i]) != len(s) {
			return nil, fmt.Errorf("%s: sequence %d has %d tokens and %d positions", name, i, len(s), len(g.Positions[i]))
		}
		for j, o := range g.Positions[i] {
			if len(o.IDs) != g.TopK || len(o.Logits) != g.TopK {
				return nil, fmt.Errorf("%s: sequence %d position %d has %d ids and %d logits (top_k %d)", name, i, j, len(o.IDs), len(o.Logits), g.TopK)
			}
		}
	}
	return &g, nil
}

// Check compares recomputed logits with the golden ones: at each
// position, every recorded id's logit must match within the tolerance, and
// the recomputed argmax must be a recorded id whose logit is within the
// tolerance of the recorded largest (so a near tie may fall either way).
// It returns the number of positions checked, and an error wrapping
// ErrGolden naming the first position that differs.
func (g *Golden) Check(logits []float32, vocab int) (int, error) {
	t := 0
	for i, s := range g.Tokens {
		for p := range s {
			z := logits[t*vocab : (t+1)*vocab]
			o := g.Positions[i][p]
			for k, id := range o.IDs {
				if id < 0 || int(id) >= vocab {
					return t, fmt.Errorf("%w: sequence %d position %d: id %d outside the vocabulary of %d", ErrGolden, i, p, id, vocab)
				}
				if !g.Tolerance.ok(float64(o.Logits[k]), float64(z[id])) {
					return t, fmt.Errorf("%w: sequence %d position %d: logit of token %d is %g, golden %g (tolerance abs %g rel %g)",
						ErrGolden, i, p, id, z[id], o.Logits[k], g.Tolerance.Abs, g.Tolerance.Rel)
				}
			}
			top := TopK(z, 1)[0]
			k := slices.Index(o.IDs, top)
			if k < 0 || !g.Tolerance.ok(float64(o.Logits[0]), float64(o.Logits[k])) {
				return t, fmt.Errorf("%w: sequence %d position %d: top token %d, golden %d", ErrGolden, i, p, top, o.IDs[0])
			}
			t++
		}
	}
	return t, nil
}

// Marshal writes the golden file's JSON (indented, one position per line
// would be longer than useful; the file is for programs).
func (g *Golden) Marshal() ([]byte, error) {
	b, err := json.Marshal(g)
	return append(b, '\n'), err
}
