package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"runtime"
	"slices"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"ternkit/convert"
	"ternkit/internal/filedigest"
	"ternkit/internal/inputfile"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/report"
)

// recipeFlags are the quantization options shared by pack and demo.
type recipeFlags struct {
	codec      string
	scaleRule  string
	epsilon    float64
	tie        string
	sum        string
	policyFile string
	rules      []string
	workers    int
	companions companionFlags
}

func (f *recipeFlags) register(cmd *cobra.Command) {
	d := convert.DefaultRecipe()
	cmd.Flags().StringVar(&f.codec, "codec", string(pack.Auto), "trit codec: auto (per tensor entropy where the trits leave room for it and it is smaller, else base3), base3 (5 trits/byte, 1.6 bits/weight), entropy (base3 in a zstd frame) or bits2 (4 trits/byte, fastest decode)")
	cmd.Flags().StringVar(&f.scaleRule, "scale-rule", string(d.ScaleRule), "reciprocal (w × 1/max(gamma, eps), training-code form) or quotient (w / (gamma + eps), paper form)")
	cmd.Flags().Float64Var(&f.epsilon, "epsilon", d.Epsilon, "epsilon of the scale rule, in (0, 1e-2]")
	cmd.Flags().StringVar(&f.tie, "tie", string(d.Tie), "rounding of exact halves: half-even or half-away")
	cmd.Flags().StringVar(&f.sum, "sum", string(d.Sum), "order of gamma's float64 sum: blocked16 (blocks of 2^20 weights in 16 partial sums each, one large tensor on every worker; format 1.4), strided16 (16 partial sums over the whole group, format 1.2) or sequential (index order, the order of artifacts that record none)")
	f.companions.register(cmd)
	cmd.Flags().IntVar(&f.workers, "workers", runtime.NumCPU(), "tensors quantized in parallel, a large one shared among them (the bytes written are the same for any count)")
	cmd.Flags().StringVar(&f.policyFile, "policy", "", "policy file (TOML [[rule]] tables) replacing the default policy")
	cmd.Flags().StringArrayVar(&f.rules, "rule", nil, "rule GLOB=ACTION placed before the policy's rules (repeatable); actions: ternary, ternary:row, ternary:group:N, keep, keep:f16, keep:bf16, keep:f32, int8")
	_ = cmd.RegisterFlagCompletionFunc("codec", fixedCompletions(codecNames()...))
	_ = cmd.RegisterFlagCompletionFunc("scale-rule", fixedCompletions(scaleRules...))
	_ = cmd.RegisterFlagCompletionFunc("tie", fixedCompletions(tieRules...))
	_ = cmd.RegisterFlagCompletionFunc("sum", fixedCompletions(sumOrders...))
}

var (
	scaleRules = []string{string(convert.ScaleReciprocal), string(convert.ScaleQuotient)}
	tieRules   = []string{string(convert.TieHalfEven), string(convert.TieHalfAway)}
	sumOrders  = []string{string(convert.SumBlocked16), string(convert.SumStrided16), string(convert.SumSequential)}
)

func codecNames() []string {
	names := make([]string, len(pack.WriterCodecs))
	for i, c := range pack.WriterCodecs {
		names[i] = string(c)
	}
	return names
}

// options checks the flags; it reads the policy file, if any, and adds
// what the policy warns about to w.
func (f *recipeFlags) options(w *warnings) (pack.Options, error) {
	codec, err := pack.ParseCodec(f.codec)
	if err != nil {
		return pack.Options{}, usagef("--codec: %w%s", err, didYouMean(f.codec, codecNames()))
	}
	r := convert.DefaultRecipe()
	r.ScaleRule, r.Epsilon, r.Tie, r.Sum = convert.ScaleRule(f.scaleRule), f.epsilon, convert.TieRule(f.tie), convert.SumOrder(f.sum)
	if err := r.Validate(); err != nil {
		hint := ""
		switch {
		case !slices.Contains(scaleRules, f.scaleRule):
			hint = didYouMean(f.scaleRule, scaleRules)
		case !slices.Contains(tieRules, f.tie):
			hint = didYouMean(f.tie, tieRules)
		case !slices.Contains(sumOrders, f.sum):
			hint = didYouMean(f.sum, sumOrders)
		}
		return pack.Options{}, usagef("%w%s", err, hint)
	}
	p, err := f.policy()
	if err != nil {
		return pack.Options{}, err
	}
	w.addAll(p.Warnings())
	created, err := sourceDateEpoch()
	if err != nil {
		return pack.Options{}, usageError{err}
	}
	if f.workers < 1 {
		return pack.Options{}, usagef("--workers %d: want 1 or more", f.workers)
	}
	return pack.Options{Codec: codec, Recipe: r, Policy: p, Tool: "ternkit " + version, Created: created, Workers: f.workers}, nil
}

// policy assembles the --rule flags and the --policy file (or the default).
func (f *recipeFlags) policy() (*convert.Policy, error) {
	var rules []convert.Rule
	for _, s := range f.rules {
		r, err := convert.ParseRule(s)
		if err != nil {
			return nil, usageError{fmt.Errorf("--rule: %w%s", err, actionHint(err))}
		}
		rules = append(rules, r)
	}
	base := convert.DefaultPolicy()
	if f.policyFile != "" {
		data, err := inputfile.ReadFile(f.policyFile)
		if err != nil {
			return nil, err
		}
		if base, err = convert.ParsePolicy(f.policyFile, data); err != nil {
			return nil, usageError{fmt.Errorf("%w%s", err, actionHint(err))}
		}
	}
	return &convert.Policy{Rules: append(rules, base.Rules...)}, nil
}

// actionHint suggests the action closest to an unknown one.
func actionHint(err error) string {
	var ue *convert.UnknownActionError
	if !errors.As(err, &ue) {
		return ""
	}
	valid := slices.DeleteFunc(slices.Clone(convert.ActionNames), func(a string) bool { return strings.HasSuffix(a, ":N") })
	return didYouMean(ue.Action, valid)
}

// customPolicy reports whether the user gave rules of their own.
func (f *recipeFlags) customPolicy() bool { return f.policyFile != "" || len(f.rules) > 0 }

// userRules is the number of leading rules of the policy the user wrote:
// the --rule flags and the --policy file's rules, not the default policy's.
func (f *recipeFlags) userRules(p *convert.Policy) int {
	if f.policyFile != "" {
		return len(p.Rules)
	}
	return len(f.rules)
}

func newPackCmd() *cobra.Command {
	var (
		rf          recipeFlags
		out         string
		asJSON      bool
		printPolicy bool
		plan        bool
	)
	cmd := &cobra.Command{
		Use:   "pack SRC -o OUT",
		Short: "Ternarize a safetensors checkpoint into an artifact",
		Long: `pack reads SRC (a .safetensors file, the index of a sharded set, or a
directory holding either) and applies the policy to every tensor:
by default every 2-D float tensor except embeddings and the output head
(names containing "embed" or "lm_head") is ternarized per tensor with the
absmean method, and the rest is kept byte for byte. --policy FILE and
--rule GLOB=ACTION choose other actions (ternary at tensor, row or group
granularity, keep, keep:f16/bf16/f32, int8); --print-policy shows the policy
in effect. The checkpoint's companion files (config, tokenizer, licence,
model card: the default names are in README, "Companion files") are carried
into the artifact; --companion GLOB adds, --no-companions drops them. The
artifact is written to OUT atomically: on any error nothing
is written at OUT.

--plan reads SRC's headers only and prints, per tensor, the action the
policy takes, its granularity, codec and projected bytes, with totals; it
reads no weight and writes nothing.

A rule or a dtype filter that matches nothing is a warning; with --strict
(or TERNKIT_STRICT=1) every warning is an error (exit 2) and nothing is
written.`,
		Example: `  ternkit pack model.safetensors -o model.tkart
  ternkit pack model.safetensors.index.json -o model.tkart
  ternkit pack model.safetensors -o model.tkart --rule '*.mlp.*=ternary:group:128' --rule '*embed*=int8'
  ternkit pack model.safetensors --plan --rule '*embed*=int8'   # what would be done, without doing it
  ternkit pack --print-policy > policy.toml
  ternkit pack model.safetensors -o model.tkart --policy policy.toml --codec bits2
  ternkit pack model.safetensors -o model.tkart --json --quiet --strict   # in a pipeline`,
		Args: func(cmd *cobra.Command, args []string) error {
			if printPolicy {
				return exactArgs(0)(cmd, args)
			}
			return exactArgs(1)(cmd, args)
		},
		ValidArgsFunction: checkpointCompletion,
		RunE: func(cmd *cobra.Command, args []string) error {
			if printPolicy {
				if plan {
					return usagef("--print-policy and --plan do not go together (--plan SRC shows the policy applied to SRC)")
				}
				p, err := rf.policy()
				if err != nil {
					return err
				}
				_, err = io.WriteString(cmd.OutOrStdout(), p.TOML())
				return err
			}
			if plan {
				if out != "" {
					return usagef("--plan writes nothing; drop -o %q", out)
				}
				return runPlan(cmd, args[0], &rf, asJSON)
			}
			if out == "" {
				return usagef("pack needs -o OUT (the artifact to write)")
			}
			if st, err := os.Stat(out); err == nil && st.IsDir() {
				return usagef("-o %q is a directory; give the artifact's file name", out)
			}
			w := newWarnings(cmd)
			opts, err := rf.options(w)
			if err != nil {
				return err
			}
			start := time.Now()
			bar := newProgressBar(cmd, "pack")
			opts.Progress = bar.callback()
			m, err := packFile(args[0], out, opts, &rf.companions, rf.userRules(opts.Policy), w)
			bar.finish()
			if err != nil {
				return checkpointHint(err, args[0])
			}
			return printPackResult(cmd, out, m, time.Since(start), asJSON, w)
		},
	}
	rf.register(cmd)
	cmd.Flags().StringVarP(&out, "output", "o", "", "artifact `FILE` to write (conventionally *"+pack.Extension+")")
	_ = cmd.MarkFlagFilename("output", strings.TrimPrefix(pack.Extension, "."))
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the result as JSON (keys in README, \"JSON output\")")
	cmd.Flags().BoolVar(&printPolicy, "print-policy", false, "print the policy in effect (TOML) and exit")
	cmd.Flags().BoolVar(&plan, "plan", false, "dry run: read SRC's headers only and print what each tensor would become, and the projected sizes; write nothing")
	return cmd
}

// packFile opens src and builds the artifact at out, carrying the
// companion files comp selects. It warns about each of the first userRules
// rules that matches no tensor of the source, and about a config companion
// that disagrees with the tensors. The manifest records the rules of
// opts.Policy, the ones applied, whatever route set them. Under strict mode
// a warning stops it before anything is written.
func packFile(src, out string, opts pack.Options, comp *companionFlags, userRules int, w *warnings) (*manifest.Manifest, error) {
	s, err := openSource(src, w)
	if err != nil {
		return nil, err
	}
	defer s.Close()
	if opts.Companions, err = comp.find(s); err != nil {
		return nil, err
	}
	comp.warnUnmatched(w, s, opts.Companions)
	warnConfig(w, opts.Companions, s.Tensors)
	inputs := []string{src, s.Path}
	for _, f := range s.Files {
		inputs = append(inputs, f.Path)
	}
	for _, c := range opts.Companions {
		inputs = append(inputs, c.Path)
	}
	if err := checkOutput(out, inputs...); err != nil {
		return nil, err
	}
	if opts.Policy == nil {
		opts.Policy = convert.DefaultPolicy()
	}
	opts.PolicyRules = opts.Policy.Describe()
	warnUnmatched(opts.Policy, userRules, s, src, w)
	if err := w.check(); err != nil {
		return nil, err
	}
	return pack.Build(s, out, opts)
}

// warnUnmatched warns about each of the first userRules rules of p that
// matches no tensor of s.
func warnUnmatched(p *convert.Policy, userRules int, s *convert.Source, src string, w *warnings) {
	user := &convert.Policy{Rules: p.Rules[:min(userRules, len(p.Rules))]}
	for _, r := range user.Unmatched(s.Tensors) {
		w.add("rule %q matches no tensor of %s", r.String(), src)
	}
}

// packJSON is what pack --json prints (keys in README, "JSON output").
type packJSON struct {
	Artifact string          `json:"artifact"`
	Bytes    int64           `json:"bytes"`
	BLAKE3   string          `json:"blake3"`
	SHA256   string          `json:"sha256"`
	Seconds  float64         `json:"seconds"`
	Totals   manifest.Totals `json:"totals"`
	Warnings []string        `json:"warnings"`
}

func printPackResult(cmd *cobra.Command, out string, m *manifest.Manifest, took time.Duration, asJSON bool, w *warnings) error {
	t := m.Totals
	if needsCaution(m) {
		defer printCaution(cmd)
	}
	st, err := os.Stat(out)
	if err != nil {
		return err
	}
	size := st.Size()
	if asJSON {
		d, err := filedigest.FileWorkers(out, 0) // only --json prints them
		if err != nil {
			return err
		}
		return writeJSON(cmd.OutOrStdout(), packJSON{Artifact: out, Bytes: size, BLAKE3: d.BLAKE3, SHA256: d.SHA256, Seconds: took.Seconds(), Totals: t, Warnings: w.JSON()})
	}
	stdout := textOut(cmd)
	fmt.Fprintf(stdout, "packed %s: %d tensors (%d ternary, %d int8, %d kept), %s -> %s (%s) in %s\n",
		out, t.Tensors, t.TernaryTensors, t.Int8Tensors, t.KeptTensors, humanBytes(t.SourceBytes), humanBytes(size),
		report.FormatSizeChange(ratio(t.SourceBytes, size)), took.Round(time.Millisecond))
	if t.TernaryTensors > 0 {
		exact := ""
		if n := exactCount(m); n > 0 {
			exact = fmt.Sprintf(", %d of %d tensors exact", n, t.TernaryTensors)
		}
		fmt.Fprintf(stdout, "ternary: %d weights at %.3f bits/weight (scales included), %.1f%% zeros%s\n",
			t.TernaryParams, t.BitsPerTernaryWeight, 100*zeroFraction(m), exact)
	}
	return nil
}

// needsCaution reports whether any ternary tensor lost information.
func needsCaution(m *manifest.Manifest) bool {
	return exactCount(m) < m.Totals.TernaryTensors
}

func exactCount(m *manifest.Manifest) int {
	n := 0
	for _, e := range m.Tensors {
		if e.Kind == manifest.KindTernary && e.Exact {
			n++
		}
	}
	return n
}

// zeroFraction is the fraction of zero trits over all ternary tensors.
func zeroFraction(m *manifest.Manifest) float64 {
	var zero, all int64
	for _, e := range m.Tensors {
		if e.Trits != nil {
			zero += e.Trits.Zero
			all += e.Trits.Total()
		}
	}
	if all == 0 {
		return 0
	}
	return float64(zero) / float64(all)
}

func ratio(a, b int64) float64 {
	if b == 0 {
		return 0
	}
	return float64(a) / float64(b)
}

func humanBytes(n int64) string { return report.FormatBytes(n) }
