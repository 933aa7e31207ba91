package convert

import (
	"fmt"
	"strings"
)

// ActionNames are the actions a rule can take, in the form a policy writes
// them (N is a group size).
var ActionNames = []string{ActTernary, ActTernary + ":row", ActTernary + ":group:N", ActKeep, ActKeepF16, ActKeepBF16, ActKeepF32, ActInt8}

// UnknownActionError is an action string that names no action.
type UnknownActionError struct{ Action string }

func (e *UnknownActionError) Error() string {
	return fmt.Sprintf("unknown action %q (valid: %s)", e.Action, strings.Join(ActionNames, ", "))
}

// canonicalDTypes writes dtype names in upper case, as safetensors headers
// do: a policy's "bf16" means "BF16".
func canonicalDTypes(dtypes []string) []string {
	if dtypes == nil {
		return nil
	}
	out := make([]string, len(dtypes))
	for i, d := range dtypes {
		out[i] = strings.ToUpper(strings.TrimSpace(d))
	}
	return out
}

// Warnings lists what in the policy is likely a mistake but not an error:
// a dtype filter naming a dtype ternkit does not know (such a rule can only
// match tensors of that exact dtype string), or one the rules never decide
// (integer and BOOL tensors are always kept).
func (p *Policy) Warnings() []string {
	var out []string
	for i, r := range p.Rules {
		for _, d := range r.DTypes {
			_, known := DTypeSize(d)
			switch {
			case !known:
				out = append(out, fmt.Sprintf("rule %d (%s): dtype %q is not one ternkit knows (float dtypes: F64, F32, F16, BF16, F8_E4M3, F8_E5M2)", i+1, r, d))
			case !quantizable(d):
				out = append(out, fmt.Sprintf("rule %d (%s): dtype %q is never decided by rules (integer and BOOL tensors are always kept)", i+1, r, d))
			}
		}
	}
	return out
}
