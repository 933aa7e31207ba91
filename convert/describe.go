package convert

import (
	"fmt"
	"strconv"
	"strings"
)

// ParseDescribedRule reads a rule in the form Rule.String (and so
// Policy.Describe, and the manifest's "policy") writes it:
// "GLOB = ACTION", "GLOB (2-D) = ACTION", "GLOB (2-D, F32|BF16) = ACTION"
// or "GLOB (F32|BF16) = ACTION". The rule read must describe itself with
// the same string. A glob that itself ends in " (F32)" reads as a filter:
// the form cannot tell them apart, and dtype filters are the likelier.
func ParseDescribedRule(s string) (Rule, error) {
	bad := fmt.Errorf("%w: policy rule %q is not in the form \"GLOB [(N-D, DTYPE|...)] = ACTION\"", ErrPolicy, s)
	i := strings.LastIndex(s, " = ")
	if i < 0 {
		return Rule{}, bad
	}
	a, err := ParseAction(s[i+3:])
	if err != nil {
		return Rule{}, fmt.Errorf("policy rule %q: %w", s, err)
	}
	left := s[:i]
	candidates := []Rule{{Match: left, Action: a}}
	if j := strings.LastIndex(left, " ("); j >= 0 && strings.HasSuffix(left, ")") {
		if r, ok := parseFilters(left[j+2 : len(left)-1]); ok {
			r.Match, r.Action = left[:j], a
			candidates = append([]Rule{r}, candidates...)
		}
	}
	for _, r := range candidates {
		if r.String() == s && r.validate() == nil {
			return r, nil
		}
	}
	return Rule{}, bad
}

// parseFilters reads "2-D", "2-D, F32|BF16" or "F32|BF16".
func parseFilters(f string) (Rule, bool) {
	var r Rule
	if d, rest, ok := strings.Cut(f, "-D"); ok {
		n, err := strconv.Atoi(d)
		if err != nil || n <= 0 {
			return Rule{}, false
		}
		r.Dims = n
		if rest == "" {
			return r, true
		}
		var cut bool
		if f, cut = strings.CutPrefix(rest, ", "); !cut {
			return Rule{}, false
		}
	}
	if f == "" {
		return Rule{}, false
	}
	r.DTypes = strings.Split(f, "|")
	for _, d := range r.DTypes {
		if !isDTypeName(d) {
			return Rule{}, false
		}
	}
	return r, true
}

// ParseDescribedPolicy reads the rules of a policy as Describe lists them.
func ParseDescribedPolicy(rules []string) (*Policy, error) {
	p := &Policy{}
	for _, s := range rules {
		r, err := ParseDescribedRule(s)
		if err != nil {
			return nil, err
		}
		p.Rules = append(p.Rules, r)
	}
	return p, nil
}
