package diff

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Conditions for using diff as a gate: a release pipeline fails when one
// holds between the previous release and the candidate.

// ErrCondition reports a condition that does not parse.
var ErrCondition = errors.New("bad --fail-on condition")

// Condition names, as --fail-on takes them.
const (
	CondTrits    = "trits"         // any trit differs (decodes trits)
	CondSections = "sections"      // any common tensor's section bytes differ
	CondAdded    = "added"         // a tensor was added
	CondRemoved  = "removed"       // a tensor was removed
	CondReshaped = "reshaped"      // a tensor changed shape
	CondKind     = "kind"          // a tensor changed kind (ternary, int8, kept)
	CondScale    = "scale"         // scale=R: a scale drifted by more than R relative, or became incomparable
	CondRelRMSE  = "rel_rmse"      // rel_rmse=D: |Δ relative RMSE| > D
	CondCosine   = "cosine"        // cosine=D: |Δ cosine| > D
	CondZero     = "zero_fraction" // zero_fraction=D: |Δ zero fraction| > D
	CondAny      = "any"           // any difference at all
)

// ConditionNames lists the conditions, with =V for those that take a value.
var ConditionNames = []string{CondTrits, CondSections, CondAdded, CondRemoved, CondReshaped, CondKind,
	CondScale + "=R", CondRelRMSE + "=D", CondCosine + "=D", CondZero + "=D", CondAny}

// Condition is one parsed --fail-on condition.
type Condition struct {
	Name  string
	Limit float64 // for scale and the statistics
}

func (c Condition) String() string {
	if c.takesValue() {
		return c.Name + "=" + strconv.FormatFloat(c.Limit, 'g', -1, 64)
	}
	return c.Name
}

func (c Condition) takesValue() bool {
	switch c.Name {
	case CondScale, CondRelRMSE, CondCosine, CondZero:
		return true
	}
	return false
}

// ParseCondition reads "trits", "added", "scale=0.01", "rel_rmse=0.005", ...
func ParseCondition(s string) (Condition, error) {
	name, val, hasVal := strings.Cut(strings.TrimSpace(s), "=")
	c := Condition{Name: strings.TrimSpace(name)}
	known := false
	for _, n := range ConditionNames {
		if strings.TrimSuffix(strings.TrimSuffix(n, "=R"), "=D") == c.Name {
			known = true
		}
	}
	if !known {
		return c, fmt.Errorf("%w: %q names no condition (valid: %s)", ErrCondition, s, strings.Join(ConditionNames, ", "))
	}
	switch {
	case c.takesValue() && !hasVal:
		return c, fmt.Errorf("%w: %q needs a value, e.g. %s=0.01", ErrCondition, s, c.Name)
	case !c.takesValue() && hasVal:
		return c, fmt.Errorf("%w: %q takes no value", ErrCondition, s)
	case hasVal:
		v, err := strconv.ParseFloat(strings.TrimSpace(val), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			return c, fmt.Errorf("%w: %q: the value must be a number, 0 or more", ErrCondition, s)
		}
		c.Limit = v
	}
	return c, nil
}

// NeedsTrits reports whether any condition needs decoded trits.
func NeedsTrits(conds []Condition) bool {
	for _, c := range conds {
		if c.Name == CondTrits {
			return true
		}
	}
	return false
}

// Failures lists, for each condition that holds, why: one line naming the
// condition and the first tensors or counts that make it hold.
func (r *Report) Failures(conds []Condition) []string {
	var out []string
	for _, c := range conds {
		if why := r.holds(c); why != "" {
			out = append(out, fmt.Sprintf("%s: %s", c, why))
		}
	}
	return out
}

func (r *Report) holds(c Condition) string {
	t := r.Totals
	switch c.Name {
	case CondAny:
		if !r.Same() {
			return "the artifacts differ"
		}
	case CondAdded:
		if t.Added > 0 {
			return fmt.Sprintf("%d tensor(s) added, first %q", t.Added, r.Added[0].Name)
		}
	case CondRemoved:
		if t.Removed > 0 {
			return fmt.Sprintf("%d tensor(s) removed, first %q", t.Removed, r.Removed[0].Name)
		}
	case CondReshaped:
		if t.Reshaped > 0 {
			return fmt.Sprintf("%d tensor(s) reshaped, first %q", t.Reshaped, r.Reshaped[0].Name)
		}
	case CondSections:
		if t.SectionsDiffer > 0 {
			return fmt.Sprintf("%d tensor(s) with different section bytes", t.SectionsDiffer)
		}
	case CondTrits:
		if t.TritsDiffer > 0 {
			return fmt.Sprintf("%d of %d trits differ", t.TritsDiffer, t.TritsCompared)
		}
	}
	var hits []string
	for _, ch := range r.Changed {
		if why := ch.holds(c); why != "" {
			hits = append(hits, fmt.Sprintf("%s (%s)", ch.Name, why))
		}
	}
	if len(hits) == 0 {
		return ""
	}
	if len(hits) > 3 {
		return fmt.Sprintf("%d tensors, first %s", len(hits), strings.Join(hits[:3], ", "))
	}
	return strings.Join(hits, ", ")
}

// holds says why condition c holds for the tensor, or "".
func (c *TensorChange) holds(cond Condition) string {
	delta := func(a, b *float64) (float64, bool) {
		if a == nil || b == nil {
			return 0, false
		}
		return math.Abs(*b - *a), true
	}
	switch cond.Name {
	case CondKind:
		if c.KindA != c.KindB {
			return fmt.Sprintf("%s -> %s", c.KindA, c.KindB)
		}
	case CondScale:
		if c.ScaleDrift == nil {
			// Both scaled (ternary or int8) but not comparable: another
			// granularity. A change of kind is the kind condition's.
			if c.KindA == c.KindB && c.KindA != "kept" && c.GranA != c.GranB {
				return fmt.Sprintf("scales not comparable: granularity %s -> %s", c.GranA, c.GranB)
			}
			return ""
		}
		if *c.ScaleDrift > cond.Limit {
			return fmt.Sprintf("scale drift %.4g", *c.ScaleDrift)
		}
	case CondRelRMSE:
		if d, ok := delta(c.RelRMSEA, c.RelRMSEB); ok && d > cond.Limit {
			return fmt.Sprintf("rel_rmse %.4f -> %.4f", *c.RelRMSEA, *c.RelRMSEB)
		}
	case CondCosine:
		if d, ok := delta(c.CosineA, c.CosineB); ok && d > cond.Limit {
			return fmt.Sprintf("cosine %.4f -> %.4f", *c.CosineA, *c.CosineB)
		}
	case CondZero:
		if d, ok := delta(c.ZeroA, c.ZeroB); ok && d > cond.Limit {
			return fmt.Sprintf("zero fraction %.4f -> %.4f", *c.ZeroA, *c.ZeroB)
		}
	}
	return ""
}
