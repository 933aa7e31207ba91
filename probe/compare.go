package probe

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
)

// LayerStat compares the residual stream after one layer, over every
// probe token: cosine = Σab / sqrt(Σa² Σb²) and relative L2 =
// ‖a − b‖ / ‖b‖, with a the artifact's and b the source's.
type LayerStat struct {
	Layer  int     `json:"layer"`
	Cosine float64 `json:"cosine"`
	RelL2  float64 `json:"rel_l2"`
}

// Result is a probe's outcome. The logit statistics are over every
// position of every sequence: KL(source ‖ artifact) of the next-token
// distributions, top-1 agreement (fraction of positions whose argmax is
// the same), top-5 overlap (mean |top5 ∩ top5| / 5). NLL is the mean
// negative log-likelihood, in nats, of each sequence's next tokens (only
// for tokens the user gave: on random ids it means nothing).
type Result struct {
	Sequences   int    `json:"sequences"`
	Positions   int    `json:"positions"`
	Activations string `json:"activations"`
	// Compared is set when the source ran too; the fields after it are
	// meaningful only then.
	Compared    bool        `json:"compared"`
	Layers      []LayerStat `json:"layers,omitempty"`
	MeanKL      float64     `json:"mean_kl"`
	MaxKL       float64     `json:"max_kl"`
	Top1        float64     `json:"top1_agreement"`
	Top5        float64     `json:"top5_overlap"`
	NLLArtifact *float64    `json:"nll_artifact,omitempty"`
	NLLSource   *float64    `json:"nll_source,omitempty"`

	// Logits are the artifact's, one row of Vocab per position.
	Logits []float32 `json:"-"`
}

// Options of a probe.
type Options struct {
	Activations string // ActInt8 or ActFloat, recorded in the result
	NLL         bool   // the tokens are real text: report each model's NLL
}

// Run runs the artifact's weights alone, and, when src is not nil, the
// source's in lockstep with it (one layer of each at a time), comparing
// the two. Both weights are checked against the layout first.
func Run(a *Arch, art, src Weights, seqs [][]int32, opts Options) (*Result, error) {
	for _, w := range []Weights{art, src} {
		if w != nil {
			if err := a.Place(w); err != nil {
				return nil, err
			}
		}
	}
	res := &Result{Sequences: len(seqs), Activations: opts.Activations}
	sa, err := Start(a, art, seqs)
	if err != nil {
		return nil, err
	}
	var ss *State
	if src != nil {
		if ss, err = Start(a, src, seqs); err != nil {
			return nil, err
		}
	}
	for l := range a.Layers {
		if err := sa.Layer(); err != nil {
			return nil, err
		}
		if ss == nil {
			continue
		}
		if err := ss.Layer(); err != nil {
			return nil, err
		}
		cos, rel := compareVectors(sa.X, ss.X)
		res.Layers = append(res.Layers, LayerStat{Layer: l, Cosine: cos, RelL2: rel})
	}
	if res.Logits, err = sa.Logits(); err != nil {
		return nil, err
	}
	res.Positions = sa.N
	if opts.NLL {
		v := meanNLL(res.Logits, seqs, a.Vocab)
		res.NLLArtifact = &v
	}
	if ss == nil {
		return res, nil
	}
	ls, err := ss.Logits()
	if err != nil {
		return nil, err
	}
	if opts.NLL {
		v := meanNLL(ls, seqs, a.Vocab)
		res.NLLSource = &v
	}
	for t := range sa.N {
		pa := logSoftmax(res.Logits[t*a.Vocab : (t+1)*a.Vocab])
		ps := logSoftmax(ls[t*a.Vocab : (t+1)*a.Vocab])
		var kl float64
		for i, lp := range ps {
			kl += math.Exp(lp) * (lp - pa[i])
		}
		kl = max(kl, 0) // rounding can take a zero divergence just below 0
		res.MeanKL += kl
		res.MaxKL = max(res.MaxKL, kl)
		ta, ts := TopK(res.Logits[t*a.Vocab:(t+1)*a.Vocab], 5), TopK(ls[t*a.Vocab:(t+1)*a.Vocab], 5)
		if ta[0] == ts[0] {
			res.Top1++
		}
		common := 0
		for _, id := range ta {
			if slices.Contains(ts, id) {
				common++
			}
		}
		res.Top5 += float64(common) / float64(len(ta))
	}
	n := float64(sa.N)
	res.Compared = true
	res.MeanKL /= n
	res.Top1 /= n
	res.Top5 /= n
	return res, nil
}

func compareVectors(a, b []float32) (cos, rel float64) {
	var ab, aa, bb, dd float64
	for i := range a {
		x, y := float64(a[i]), float64(b[i])
		ab += x * y
		aa += x * x
		bb += y * y
		dd += (x - y) * (x - y)
	}
	switch {
	case aa == 0 && bb == 0:
		cos = 1
	case aa > 0 && bb > 0:
		cos = ab / math.Sqrt(aa*bb)
	}
	if bb > 0 {
		rel = math.Sqrt(dd / bb)
	} else if dd > 0 {
		rel = math.Inf(1)
	}
	return cos, rel
}

// logSoftmax returns log p in float64.
func logSoftmax(z []float32) []float64 {
	top := math.Inf(-1)
	for _, v := range z {
		top = max(top, float64(v))
	}
	var sum float64
	for _, v := range z {
		sum += math.Exp(float64(v) - top)
	}
	lse := top + math.Log(sum)
	out := make([]float64, len(z))
	for i, v := range z {
		out[i] = float64(v) - lse
	}
	return out
}

// meanNLL is the mean −log p(next token) over every position that has a
// next token.
func meanNLL(logits []float32, seqs [][]int32, vocab int) float64 {
	var sum float64
	n, start := 0, 0
	for _, s := range seqs {
		for p := 0; p+1 < len(s); p++ {
			t := start + p
			lp := logSoftmax(logits[t*vocab : (t+1)*vocab])
			sum -= lp[s[p+1]]
			n++
		}
		start += len(s)
	}
	if n == 0 {
		return 0
	}
	return sum / float64(n)
}

// TopK returns the ids of the k largest logits, largest first; ties go to
// the smaller id.
func TopK(z []float32, k int) []int32 {
	k = min(k, len(z))
	ids := make([]int32, 0, k+1)
	for i, v := range z {
		if len(ids) == k && !(v > z[ids[k-1]]) {
			continue
		}
		j := len(ids)
		for j > 0 && v > z[ids[j-1]] {
			j--
		}
		ids = slices.Insert(ids, j, int32(i))
		if len(ids) > k {
			ids = ids[:k]
		}
	}
	return ids
}

// RandomTokens draws n sequences of length l of ids uniform in
// [0, vocab) from a PCG generator seeded with seed: the same seed gives
// the same tokens on every machine.
func RandomTokens(n, l, vocab int, seed uint64) [][]int32 {
	rng := rand.New(rand.NewPCG(seed, 0x70726f6265))
	seqs := make([][]int32, n)
	for i := range seqs {
		seqs[i] = make([]int32, l)
		for j := range seqs[i] {
			seqs[i][j] = int32(rng.IntN(vocab))
		}
	}
	return seqs
}

// MaxTokens caps a tokens file: the probe is a smoke test, and attention
// costs grow with the square of a sequence's length.
const MaxTokens = 1 << 16

// ParseTokens reads token ids, one sequence per line, ids separated by
// spaces, tabs or commas; blank lines and lines starting with # are
// skipped. name is used in messages.
func ParseTokens(name string, r io.Reader) ([][]int32, error) {
	var seqs [][]int32
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 64<<10), 16<<20)
	line, total := 0, 0
	for sc.Scan() {
		line++
		text := strings.TrimSpace(sc.Text())
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		var seq []int32
		for _, f := range strings.FieldsFunc(text, func(r rune) bool { return r == ' ' || r == '\t' || r == ',' }) {
			id, err := strconv.ParseInt(f, 10, 32)
			if err != nil || id < 0 {
				return nil, fmt.Errorf("%w: %s line %d: %q is not a token id", ErrTokens, name, line, f)
			}
			seq = append(seq, int32(id))
		}
		if total += len(seq); total > MaxTokens {
			return nil, fmt.Errorf("%w: %s holds more than %d tokens", ErrTokens, name, MaxTokens)
		}
		seqs = append(seqs, seq)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%w: %s line %d: %w", ErrTokens, name, line+1, err)
	}
	if len(seqs) == 0 {
		return nil, fmt.Errorf("%w: %s holds no sequence", ErrTokens, name)
	}
	return seqs, nil
}
