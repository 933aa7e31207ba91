package convert

import (
	"bytes"
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"

	"github.com/BurntSushi/toml"
)

// Action kinds: what the packer does with one tensor.
const (
	ActTernary  = "ternary"   // absmean trits, at a granularity
	ActKeep     = "keep"      // source bytes unchanged
	ActKeepF16  = "keep:f16"  // converted to F16, rounding to nearest even
	ActKeepBF16 = "keep:bf16" // converted to BF16, rounding to nearest even
	ActKeepF32  = "keep:f32"  // converted to F32 (F64 rounds to nearest even)
	ActInt8     = "int8"      // per-row absmax int8, for embeddings
)

// ErrPolicy reports a malformed policy, or a rule whose action a tensor
// cannot take.
var ErrPolicy = errors.New("policy error")

// Action is a parsed action: its kind and, for ternary, the granularity.
type Action struct {
	Kind        string
	Granularity Granularity
}

// ParseAction reads "ternary", "ternary:row", "ternary:group:N", "keep",
// "keep:f16", "keep:bf16", "keep:f32" or "int8".
func ParseAction(s string) (Action, error) {
	switch s {
	case ActKeep, ActKeepF16, ActKeepBF16, ActKeepF32, ActInt8:
		return Action{Kind: s}, nil
	case ActTernary:
		return Action{Kind: ActTernary, Granularity: PerTensor}, nil
	}
	if g, ok := strings.CutPrefix(s, ActTernary+":"); ok {
		gran, err := ParseGranularity(g)
		if err != nil {
			return Action{}, fmt.Errorf("%w: action %q: %v", ErrPolicy, s, err)
		}
		return Action{Kind: ActTernary, Granularity: gran}, nil
	}
	return Action{}, fmt.Errorf("%w: %w", ErrPolicy, &UnknownActionError{Action: s})
}

func (a Action) String() string {
	if a.Kind == ActTernary && a.Granularity.Kind != GranTensor {
		return ActTernary + ":" + a.Granularity.String()
	}
	return a.Kind
}

// KeptDType is the dtype a keep action stores for a source dtype.
func (a Action) KeptDType(source string) string {
	switch a.Kind {
	case ActKeepF16:
		return "F16"
	case ActKeepBF16:
		return "BF16"
	case ActKeepF32:
		return "F32"
	}
	return source
}

// Rule maps tensors whose name matches a glob (and, optionally, a number
// of dimensions and a set of dtypes) to an action.
type Rule struct {
	Match  string   // glob over the tensor name (MatchGlob): * any run, / included, ? one character, [a-z] a class
	Dims   int      // 0: any number of dimensions
	DTypes []string // empty: any float dtype
	Action Action
}

func (r Rule) String() string {
	var b strings.Builder
	b.WriteString(r.Match)
	if r.Dims > 0 {
		fmt.Fprintf(&b, " (%d-D", r.Dims)
	}
	if len(r.DTypes) > 0 {
		if r.Dims > 0 {
			b.WriteString(", ")
		} else {
			b.WriteString(" (")
		}
		b.WriteString(strings.Join(r.DTypes, "|"))
	}
	if r.Dims > 0 || len(r.DTypes) > 0 {
		b.WriteString(")")
	}
	return b.String() + " = " + r.Action.String()
}

func (r Rule) matches(t *Tensor) bool {
	if !matchGlob(r.Match, t.Name) {
		return false
	}
	if r.Dims > 0 && len(t.Shape) != r.Dims {
		return false
	}
	return len(r.DTypes) == 0 || slices.Contains(r.DTypes, t.DType)
}

func (r Rule) validate() error {
	if r.Match == "" {
		return fmt.Errorf("%w: rule %q has an empty glob", ErrPolicy, r.String())
	}
	if err := CheckGlob(r.Match); err != nil {
		return fmt.Errorf("%w: %v", ErrPolicy, err)
	}
	if r.Dims < 0 {
		return fmt.Errorf("%w: rule %q: dims %d is negative", ErrPolicy, r.Match, r.Dims)
	}
	return nil
}

// ParseRule reads a rule in the flag form GLOB=ACTION, e.g.
// "*.mlp.*=ternary:group:64".
func ParseRule(s string) (Rule, error) {
	i := strings.LastIndex(s, "=")
	if i < 0 {
		return Rule{}, fmt.Errorf("%w: rule %q is not GLOB=ACTION", ErrPolicy, s)
	}
	a, err := ParseAction(strings.TrimSpace(s[i+1:]))
	if err != nil {
		return Rule{}, err
	}
	r := Rule{Match: strings.TrimSpace(s[:i]), Action: a}
	return r, r.validate()
}

// Policy is an ordered list of rules; the first that matches a tensor
// decides. Integer, BOOL and unknown-dtype tensors are always kept and never
// consult the rules; a float tensor that no rule matches is kept.
type Policy struct {
	Rules []Rule
}

// floatTypes are the dtypes the default policy ternarizes.
var floatTypes = []string{"F64", "F32", "F16", "BF16"}

// DefaultPolicy ternarizes every 2-D F64/F32/F16/BF16 tensor per tensor,
// except embeddings and the output head (names containing "embed" or
// "lm_head"), and keeps the rest in their source dtype.
func DefaultPolicy() *Policy {
	keep := Action{Kind: ActKeep}
	return &Policy{Rules: []Rule{
		{Match: "*embed*", Action: keep},
		{Match: "*lm_head*", Action: keep},
		{Match: "*", Dims: 2, DTypes: floatTypes, Action: Action{Kind: ActTernary, Granularity: PerTensor}},
		{Match: "*", Action: keep},
	}}
}

// quantizable reports whether a dtype is a float the rules decide on.
func quantizable(dtype string) bool {
	switch dtype {
	case "F64", "F32", "F16", "BF16", "F8_E4M3", "F8_E5M2":
		return true
	}
	return false
}

// Decide returns the action for t and the index of the rule that chose it
// (−1 when no rule applies). Integer and BOOL tensors are kept without
// consulting the rules. An action the tensor cannot take is an ErrPolicy
// error naming the rule and the tensor; a dtype ternkit cannot decode
// (one it does not know) matched by any action but keep also wraps
// ErrDType.
func (p *Policy) Decide(t *Tensor) (Action, int, error) {
	_, known := DTypeSize(t.DType)
	if known && !quantizable(t.DType) {
		return Action{Kind: ActKeep}, -1, nil
	}
	for i, r := range p.Rules {
		if !r.matches(t) {
			continue
		}
		if !known && r.Action.Kind != ActKeep {
			return Action{}, i, fmt.Errorf("%w: rule %d (%s) on tensor %q: %w: %q can only be kept byte for byte", ErrPolicy, i+1, r, t.Name, ErrDType, t.DType)
		}
		if err := r.Action.check(t); err != nil {
			return Action{}, i, fmt.Errorf("%w: rule %d (%s) on tensor %q: %v", ErrPolicy, i+1, r, t.Name, err)
		}
		return r.Action, i, nil
	}
	return Action{Kind: ActKeep}, -1, nil
}

// check reports why t cannot take action a.
func (a Action) check(t *Tensor) error {
	switch a.Kind {
	case ActTernary, ActInt8:
		if len(t.Shape) < 2 {
			return fmt.Errorf("%s needs 2 or more dimensions, shape is %v", a, t.Shape)
		}
		if a.Kind == ActTernary {
			n := int(t.NumElements())
			if _, err := a.Granularity.GroupSize(n, Columns(t.Shape)); err != nil {
				return fmt.Errorf("%s on shape %v: %v", a, t.Shape, err)
			}
		}
	}
	return nil
}

// Unmatched lists the rules whose glob and filters match none of ts.
func (p *Policy) Unmatched(ts []*Tensor) []Rule {
	var out []Rule
	for _, r := range p.Rules {
		if !slices.ContainsFunc(ts, r.matches) {
			out = append(out, r)
		}
	}
	return out
}

// Describe lists the rules one per line in the flag form with filters, as
// recorded in the manifest's provenance.
func (p *Policy) Describe() []string {
	out := make([]string, len(p.Rules))
	for i, r := range p.Rules {
		out[i] = r.String()
	}
	return out
}

// policyFile is the TOML form of a policy.
type policyFile struct {
	Rule []struct {
		Match  string   `toml:"match"`
		Action string   `toml:"action"`
		Dims   int      `toml:"dims"`
		DTypes []string `toml:"dtypes"`
	} `toml:"rule"`
}

// ParsePolicy reads a policy in TOML: an array of [[rule]] tables with keys
// match (glob), action, and the optional filters dims and dtypes. Unknown
// keys are errors. name is used in messages.
func ParsePolicy(name string, data []byte) (*Policy, error) {
	var f policyFile
	md, err := toml.NewDecoder(bytes.NewReader(data)).Decode(&f)
	if err != nil {
		return nil, fmt.Errorf("%w: %s: %v", ErrPolicy, name, err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		return nil, fmt.Errorf("%w: %s: unknown key %q (valid in [[rule]]: match, action, dims, dtypes)", ErrPolicy, name, und[0].String())
	}
	if len(f.Rule) == 0 {
		return nil, fmt.Errorf("%w: %s: no [[rule]] tables", ErrPolicy, name)
	}
	p := &Policy{}
	for i, fr := range f.Rule {
		a, err := ParseAction(fr.Action)
		if err != nil {
			return nil, fmt.Errorf("%s: rule %d: %w", name, i+1, err)
		}
		r := Rule{Match: fr.Match, Dims: fr.Dims, DTypes: canonicalDTypes(fr.DTypes), Action: a}
		if err := r.validate(); err != nil {
			return nil, fmt.Errorf("%s: rule %d: %w", name, i+1, err)
		}
		p.Rules = append(p.Rules, r)
	}
	return p, nil
}

// TOML writes the policy in the form ParsePolicy reads.
func (p *Policy) TOML() string {
	var b strings.Builder
	b.WriteString("# ternkit policy: the first rule that matches a tensor decides.\n")
	b.WriteString("# Integer and BOOL tensors are always kept; a tensor no rule matches is kept.\n")
	for _, r := range p.Rules {
		b.WriteString("\n[[rule]]\n")
		fmt.Fprintf(&b, "match = %s\n", strconv.Quote(r.Match))
		if r.Dims > 0 {
			fmt.Fprintf(&b, "dims = %d\n", r.Dims)
		}
		if len(r.DTypes) > 0 {
			q := make([]string, len(r.DTypes))
			for i, d := range r.DTypes {
				q[i] = strconv.Quote(d)
			}
			fmt.Fprintf(&b, "dtypes = [%s]\n", strings.Join(q, ", "))
		}
		fmt.Fprintf(&b, "action = %s\n", strconv.Quote(r.Action.String()))
	}
	return b.String()
}
