package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"
	"github.com/zeebo/blake3"

	"ternkit/internal/atomicfile"
	"ternkit/manifest"
	"ternkit/modelconfig"
	"ternkit/pack"
	"ternkit/probe"
	"ternkit/verify"
)

// probeCaution goes with every probe result.
const probeCaution = "caution: a probe on a few sequences is a smoke test, not an evaluation: evaluate the model on real tasks, in the runtime you ship, before deployment"

type probeFlags struct {
	against, config, tokens, activations string
	seqs, length                         int
	seed                                 uint64
	minTop1, maxKL, maxLoss              float64
	asJSON                               bool
	golden, check                        string
	topK                                 int
	tolerance                            float64
}

func newProbeCmd() *cobra.Command {
	var f probeFlags
	cmd := &cobra.Command{
		Use:   "probe ARTIFACT [--against SRC] [--config config.json]",
		Short: "Run the packed model on probe tokens and compare it with its source",
		Long: `probe runs a reference forward pass of the decoder model in the artifact, in
the arithmetic a ternary runtime uses, and with --against SRC of the source
checkpoint in float32, on the same probe tokens, one layer of each at a
time, and compares them: per layer the cosine and relative L2 of the
residual stream, on the logits the mean and max KL divergence, top-1
agreement and top-5 overlap, and with --tokens each model's mean next-token
loss (NLL).

Arithmetic: ternary matrices run on activations quantized per token to 8
bits by absmax (s = 127/max|x|, q = clip(round-half-even(x·s), -128, 127)),
exact integer sums of trits × codes per scale group, rescaled by the scale
over s; --activations float runs the trits on float32 activations. int8
tensors are codes × row scale, kept tensors their stored values.

The model config (config.json: widths, heads, rope_theta, hidden_act ...)
comes from --config FILE, else from the artifact's config.json companion,
else from the config.json beside the source given with --against. Integer
and BOOL tensors (a step counter) are not weights and are ignored; a float
tensor the layout cannot place is an error. Optional tensors:
self_attn.{q,k,v}_proj.bias, and RMSNorm weights self_attn.inner_norm
(before o_proj) and mlp.inner_norm (before down_proj).

Probe tokens: --tokens FILE (token ids from your tokenizer, one sequence
per line), else --seqs N sequences of --len L ids drawn with --seed S.
--golden OUT.json records the artifact's top-k outputs for runtimes;
--check GOLDEN.json recomputes them and compares within the file's
tolerance.

Exit status: 0 ok, 1 a budget (--min-top1, --max-kl, --max-loss-increase)
or a golden check failed, 2 usage or input error.
` + probeCaution + `.`,
		Example: `  ternkit probe model.tkart --against model.safetensors
  ternkit probe model.tkart --against model.safetensors --tokens probe-ids.txt --max-loss-increase 0.5
  ternkit probe model.tkart --against model.safetensors --min-top1 0.9 --max-kl 0.05 --json
  ternkit probe model.tkart --config config.json --golden golden.json
  ternkit probe model.tkart --config config.json --check golden.json`,
		Args:              exactArgs(1),
		ValidArgsFunction: artifactCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runProbe(cmd, args[0], f)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&f.against, "against", "", "source checkpoint to compare with (file, index or directory)")
	fl.StringVar(&f.config, "config", "", "model config (config.json); default: the artifact's companion, else the one beside --against")
	fl.StringVar(&f.tokens, "tokens", "", "file of token ids, one sequence per line")
	fl.IntVar(&f.seqs, "seqs", 2, "random probe sequences (without --tokens)")
	fl.IntVar(&f.length, "len", 32, "tokens per random sequence")
	fl.Uint64Var(&f.seed, "seed", 1, "seed of the random probe tokens")
	fl.StringVar(&f.activations, "activations", probe.ActInt8, "activations of ternary layers: int8 (deployment arithmetic) or float")
	fl.Float64Var(&f.minTop1, "min-top1", 0, "fail (exit 1) below this top-1 agreement, 0..1")
	fl.Float64Var(&f.maxKL, "max-kl", 0, "fail (exit 1) above this mean KL divergence (nats)")
	fl.Float64Var(&f.maxLoss, "max-loss-increase", 0, "fail (exit 1) when the artifact's NLL exceeds the source's by more (nats; needs --tokens)")
	fl.BoolVar(&f.asJSON, "json", false, "print the result as JSON")
	fl.StringVar(&f.golden, "golden", "", "write the artifact's golden outputs to this JSON file")
	fl.StringVar(&f.check, "check", "", "check the artifact against a golden file")
	fl.IntVar(&f.topK, "top-k", 5, "token ids per position in a golden file")
	fl.Float64Var(&f.tolerance, "tolerance", 1e-3, "logit tolerance a golden file states (absolute and relative)")
	cmd.RegisterFlagCompletionFunc("activations", fixedCompletions(probe.ActInt8, probe.ActFloat))
	cmd.RegisterFlagCompletionFunc("against", checkpointCompletion)
	cmd.RegisterFlagCompletionFunc("config", fileCompletion("json"))
	cmd.RegisterFlagCompletionFunc("check", fileCompletion("json"))
	return cmd
}

// probeConfig finds the model config: --config FILE, else the artifact's
// companion config.json, else config.json beside the source given with
// --against. It returns the bytes and where they came from.
func probeConfig(a *pack.Artifact, art, configFlag, against string) ([]byte, string, error) {
	if configFlag == "" {
		if c := a.Manifest().Companion(probeConfigName); c != nil {
			if c.Section.Length > modelconfig.MaxSize {
				return nil, "", fmt.Errorf("%s: companion %s is %d bytes, above the %d-byte limit", art, probeConfigName, c.Section.Length, modelconfig.MaxSize)
			}
			data, err := a.Companion(probeConfigName)
			return data, art + ":" + probeConfigName, err
		}
	}
	path := configFlag
	if path == "" && against != "" {
		dir := against
		if st, err := os.Stat(against); err == nil && !st.IsDir() {
			dir = filepath.Dir(against)
		}
		path = filepath.Join(dir, probeConfigName)
		if _, err := os.Stat(path); err != nil {
			return nil, "", usagef("no model config: %s carries no %s companion and %s has none beside it; give --config FILE", art, probeConfigName, against)
		}
	}
	if path == "" {
		return nil, "", usagef("no model config: %s carries no %s companion; give --config FILE, or --against SRC with %s beside it", art, probeConfigName, probeConfigName)
	}
	st, err := os.Stat(path)
	if err != nil {
		return nil, "", err
	}
	if st.Size() > modelconfig.MaxSize {
		return nil, "", fmt.Errorf("%s: config is %d bytes, above the %d-byte limit", path, st.Size(), modelconfig.MaxSize)
	}
	data, err := os.ReadFile(path)
	return data, path, err
}

// probeConfigName is the model config's file name, beside a checkpoint or
// as an artifact's companion.
const probeConfigName = verify.ConfigCompanion

func runProbe(cmd *cobra.Command, art string, f probeFlags) error {
	fl := cmd.Flags()
	if f.activations != probe.ActInt8 && f.activations != probe.ActFloat {
		return usagef("--activations %q (valid: int8, float)", f.activations)
	}
	if f.check != "" && (f.golden != "" || fl.Changed("tokens") || fl.Changed("seqs") || fl.Changed("len") || fl.Changed("seed") || fl.Changed("activations")) {
		return usagef("--check takes its tokens and activations from the golden file; drop --golden, --tokens, --seqs, --len, --seed and --activations")
	}
	if f.seqs < 1 || f.length < 1 || f.seqs*f.length > probe.MaxTokens {
		return usagef("--seqs %d --len %d: want at least 1 each and at most %d tokens in all", f.seqs, f.length, probe.MaxTokens)
	}
	if f.topK < 1 || !(f.tolerance >= 0) {
		return usagef("--top-k %d --tolerance %g: want top-k ≥ 1 and tolerance ≥ 0", f.topK, f.tolerance)
	}
	var budget probe.Budget
	for _, b := range []struct {
		name string
		v    float64
		dst  **float64
	}{{"min-top1", f.minTop1, &budget.MinTop1}, {"max-kl", f.maxKL, &budget.MaxKL}, {"max-loss-increase", f.maxLoss, &budget.MaxLossIncrease}} {
		if fl.Changed(b.name) {
			v := b.v
			*b.dst = &v
		}
	}
	if (budget.MinTop1 != nil || budget.MaxKL != nil || budget.MaxLossIncrease != nil) && f.against == "" {
		return usagef("--min-top1, --max-kl and --max-loss-increase compare with the source: give --against SRC")
	}
	if budget.MaxLossIncrease != nil && f.tokens == "" {
		return usagef("--max-loss-increase needs text: give --tokens FILE")
	}

	a, err := pack.Open(art)
	if err != nil {
		return err
	}
	defer a.Close()
	cfgBytes, cfgName, err := probeConfig(a, art, f.config, f.against)
	if err != nil {
		return err
	}
	cfg, err := modelconfig.Parse(cfgName, cfgBytes)
	if err != nil {
		return err
	}
	arch, err := probe.NewArch(cfg)
	if err != nil {
		return fmt.Errorf("%s: %w", cfgName, err)
	}
	configHash := manifest.HexHash(blake3.Sum256(cfgBytes))
	artHash := manifest.HexHash(a.ManifestHash())

	var golden *probe.Golden
	var seqs [][]int32
	act := f.activations
	switch {
	case f.check != "":
		data, err := os.ReadFile(f.check)
		if err != nil {
			return err
		}
		if golden, err = probe.ParseGolden(f.check, data); err != nil {
			return err
		}
		seqs, act = golden.Tokens, golden.Activations
	case f.tokens != "":
		r, err := os.Open(f.tokens)
		if err != nil {
			return err
		}
		seqs, err = probe.ParseTokens(f.tokens, r)
		r.Close()
		if err != nil {
			return err
		}
	default:
		seqs = probe.RandomTokens(f.seqs, f.length, arch.Vocab, f.seed)
	}

	aw, err := probe.NewArtifactWeights(a, art, act)
	if err != nil {
		return err
	}
	var sw probe.Weights
	if f.against != "" {
		s, err := probe.OpenSource(f.against)
		if err != nil {
			return err
		}
		defer s.Close()
		sw = s
	}
	start := time.Now()
	res, err := probe.Run(arch, aw, sw, seqs, probe.Options{Activations: act, NLL: f.tokens != ""})
	if err != nil {
		return err
	}
	elapsed := time.Since(start)
	broken, err := budget.Check(res)
	if err != nil {
		return usagef("%v", err)
	}

	var goldenErr error
	checked := 0
	if golden != nil {
		var fails []string
		if golden.ArtifactBLAKE3 != artHash {
			fails = append(fails, fmt.Sprintf("artifact manifest BLAKE3 %s, golden records %s", artHash, golden.ArtifactBLAKE3))
		}
		if golden.ConfigBLAKE3 != configHash {
			fails = append(fails, fmt.Sprintf("config %s BLAKE3 %s, golden records %s", cfgName, configHash, golden.ConfigBLAKE3))
		}
		checked, goldenErr = golden.Check(res.Logits, arch.Vocab)
		if goldenErr != nil {
			fails = append(fails, goldenErr.Error())
		}
		broken = append(broken, fails...)
	}
	if f.golden != "" {
		g := probe.NewGolden(res, seqs, arch.Vocab, f.topK, probe.Tolerance{Abs: f.tolerance, Rel: f.tolerance}, artHash, configHash)
		data, err := g.Marshal()
		if err != nil {
			return err
		}
		if err := atomicfile.WriteFile(f.golden, data, 0o644); err != nil {
			return err
		}
	}

	out := cmd.OutOrStdout()
	if f.asJSON {
		if err := printProbeJSON(out, art, f, cfgName, res, broken); err != nil {
			return err
		}
	} else {
		printProbe(out, art, f, cfgName, seqs, res, elapsed)
		if golden != nil && len(broken) == 0 {
			fmt.Fprintf(out, "golden %s: %d positions match within tolerance abs %g rel %g\n", f.check, checked, golden.Tolerance.Abs, golden.Tolerance.Rel)
		}
		if f.golden != "" {
			fmt.Fprintf(out, "golden outputs: %s (top %d per position, tolerance %g)\n", f.golden, f.topK, f.tolerance)
		}
		for _, b := range broken {
			fmt.Fprintf(out, "FAIL %s\n", b)
		}
		fmt.Fprintln(cmd.ErrOrStderr(), probeCaution)
	}
	if len(broken) > 0 {
		return errVerifyFailed
	}
	return nil
}

func printProbe(w io.Writer, art string, f probeFlags, cfgName string, seqs [][]int32, res *probe.Result, elapsed time.Duration) {
	what := fmt.Sprintf("%d random sequences × %d tokens (seed %d)", f.seqs, f.length, f.seed)
	if f.tokens != "" {
		what = fmt.Sprintf("%d sequences, %d tokens from %s", len(seqs), res.Positions, f.tokens)
	} else if f.check != "" {
		what = fmt.Sprintf("%d sequences, %d tokens from %s", len(seqs), res.Positions, f.check)
	}
	fmt.Fprintf(w, "probe %s", art)
	if f.against != "" {
		fmt.Fprintf(w, " against %s", f.against)
	}
	fmt.Fprintf(w, ": %s, %s activations, config %s, %s\n", what, res.Activations, cfgName, elapsed.Round(time.Millisecond))
	if res.Compared {
		fmt.Fprintf(w, "%-6s %10s %10s\n", "layer", "cosine", "rel L2")
		for _, l := range res.Layers {
			fmt.Fprintf(w, "%-6d %10.6f %10.6f\n", l.Layer, l.Cosine, l.RelL2)
		}
		fmt.Fprintf(w, "logits: mean KL %.4g, max KL %.4g, top-1 agreement %.1f%%, top-5 overlap %.1f%%\n",
			res.MeanKL, res.MaxKL, 100*res.Top1, 100*res.Top5)
	}
	if res.NLLArtifact != nil {
		fmt.Fprintf(w, "NLL (nats per token): artifact %.4f", *res.NLLArtifact)
		if res.NLLSource != nil {
			fmt.Fprintf(w, ", source %.4f (%+.4f)", *res.NLLSource, *res.NLLArtifact-*res.NLLSource)
		}
		fmt.Fprintln(w)
	}
}

func printProbeJSON(w io.Writer, art string, f probeFlags, cfgName string, res *probe.Result, broken []string) error {
	doc := struct {
		Artifact string   `json:"artifact"`
		Source   string   `json:"source,omitempty"`
		Config   string   `json:"config"`
		OK       bool     `json:"ok"`
		Failures []string `json:"failures,omitempty"`
		*probe.Result
	}{art, f.against, cfgName, len(broken) == 0, broken, res}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(doc)
}

// demoProbe runs the demo's artifact against its source with the default
// probe tokens and prints the comparison.
func demoProbe(out io.Writer, art, src string) error {
	a, err := pack.Open(art)
	if err != nil {
		return err
	}
	defer a.Close()
	data, cfgPath, err := probeConfig(a, art, "", src)
	if err != nil {
		return err
	}
	cfg, err := modelconfig.Parse(cfgPath, data)
	if err != nil {
		return err
	}
	arch, err := probe.NewArch(cfg)
	if err != nil {
		return fmt.Errorf("%s: %w", cfgPath, err)
	}
	aw, err := probe.NewArtifactWeights(a, art, probe.ActInt8)
	if err != nil {
		return err
	}
	sw, err := probe.OpenSource(src)
	if err != nil {
		return err
	}
	defer sw.Close()
	f := probeFlags{against: src, seqs: 2, length: 32, seed: 1}
	seqs := probe.RandomTokens(f.seqs, f.length, arch.Vocab, f.seed)
	start := time.Now()
	res, err := probe.Run(arch, aw, sw, seqs, probe.Options{Activations: probe.ActInt8})
	if err != nil {
		return err
	}
	printProbe(out, art, f, cfgPath, seqs, res, time.Since(start))
	return nil
}
