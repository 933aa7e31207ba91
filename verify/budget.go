package verify

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/BurntSushi/toml"

	"ternkit/convert"
	"ternkit/manifest"
)

// Budget metrics: each limits one statistic of the manifest's stats.
const (
	MaxRelRMSE  = "max_rel_rmse" // rel_rmse ≤ limit
	MinCosine   = "min_cosine"   // cosine ≥ limit
	MaxClipped  = "max_clipped"  // clipped_fraction ≤ limit
	MaxAbsError = "max_abs_err"  // max_abs_err ≤ limit
)

// Metrics lists the budget metrics.
var Metrics = []string{MaxRelRMSE, MinCosine, MaxClipped, MaxAbsError}

// ErrBudget reports a malformed budget.
var ErrBudget = errors.New("invalid budget")

// Limit bounds one metric for the tensors whose names match a glob.
type Limit struct {
	Match  string
	Metric string
	Value  float64
}

func (l Limit) String() string {
	return fmt.Sprintf("%s %s %g", l.Match, l.Metric, l.Value)
}

// check returns the statistic the limit bounds, and whether it holds.
func (l Limit) check(s convert.Stats) (float64, bool) {
	switch l.Metric {
	case MaxRelRMSE:
		return s.RelRMSE, s.RelRMSE <= l.Value
	case MinCosine:
		return s.Cosine, s.Cosine >= l.Value
	case MaxClipped:
		return s.ClippedFraction, s.ClippedFraction <= l.Value
	default:
		return s.MaxAbsErr, s.MaxAbsErr <= l.Value
	}
}

// Budget is a set of limits; every limit whose glob matches a tensor
// applies to it. Tensors without statistics (kept byte for byte) have
// nothing to budget.
type Budget struct {
	Limits []Limit
}

// ParseLimit reads a limit in the flag form VALUE (all tensors) or
// GLOB=VALUE for the given metric.
func ParseLimit(metric, s string) (Limit, error) {
	glob, val := "*", s
	if i := strings.LastIndex(s, "="); i >= 0 {
		glob, val = s[:i], s[i+1:]
	}
	v, err := strconv.ParseFloat(strings.TrimSpace(val), 64)
	if err != nil {
		return Limit{}, fmt.Errorf("%w: %s %q: %q is not a number", ErrBudget, metric, s, val)
	}
	l := Limit{Match: strings.TrimSpace(glob), Metric: metric, Value: v}
	return l, l.validate()
}

func (l Limit) validate() error {
	if !isMetric(l.Metric) {
		return fmt.Errorf("%w: unknown metric %q (valid: %s)", ErrBudget, l.Metric, strings.Join(Metrics, ", "))
	}
	if l.Match == "" {
		return fmt.Errorf("%w: %s with an empty glob", ErrBudget, l.Metric)
	}
	if err := convert.CheckGlob(l.Match); err != nil {
		return fmt.Errorf("%w: %v", ErrBudget, err)
	}
	lo, hi, what := 0.0, math.Inf(1), "a finite number ≥ 0"
	switch l.Metric {
	case MinCosine:
		lo, hi, what = -1, 1, "a cosine, in [-1, 1]"
	case MaxClipped:
		hi, what = 1, "a fraction, in [0, 1]"
	}
	if !(l.Value >= lo && l.Value <= hi) || math.IsInf(l.Value, 0) {
		return fmt.Errorf("%w: %s %v is not %s", ErrBudget, l.Metric, l.Value, what)
	}
	return nil
}

func isMetric(m string) bool {
	for _, x := range Metrics {
		if x == m {
			return true
		}
	}
	return false
}

// ParseBudget reads a budget in TOML: [[budget]] tables with a match glob
// and any of max_rel_rmse, min_cosine, max_clipped, max_abs_err. Unknown
// keys are errors. name is used in messages.
func ParseBudget(name string, data []byte) (*Budget, error) {
	var f struct {
		Budget []map[string]any `toml:"budget"`
	}
	md, err := toml.NewDecoder(bytes.NewReader(data)).Decode(&f)
	if err != nil {
		return nil, fmt.Errorf("%w: %s: %v", ErrBudget, name, err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		return nil, fmt.Errorf("%w: %s: unknown key %q (valid: [[budget]] tables)", ErrBudget, name, und[0].String())
	}
	if len(f.Budget) == 0 {
		return nil, fmt.Errorf("%w: %s: no [[budget]] tables", ErrBudget, name)
	}
	b := &Budget{}
	for i, table := range f.Budget {
		glob, ok := table["match"].(string)
		if !ok {
			return nil, fmt.Errorf("%w: %s: budget %d: match must be a string glob", ErrBudget, name, i+1)
		}
		n := 0
		for _, metric := range Metrics { // a fixed order, whatever the file's
			raw, ok := table[metric]
			if !ok {
				continue
			}
			var v float64
			switch x := raw.(type) {
			case float64:
				v = x
			case int64:
				v = float64(x)
			default:
				return nil, fmt.Errorf("%w: %s: budget %d: %s must be a number, got %v", ErrBudget, name, i+1, metric, raw)
			}
			l := Limit{Match: glob, Metric: metric, Value: v}
			if err := l.validate(); err != nil {
				return nil, fmt.Errorf("%s: budget %d: %w", name, i+1, err)
			}
			b.Limits = append(b.Limits, l)
			n++
		}
		if n+1 != len(table) {
			for k := range table {
				if k != "match" && !isMetric(k) {
					return nil, fmt.Errorf("%w: %s: budget %d: unknown key %q (valid: match, %s)", ErrBudget, name, i+1, k, strings.Join(Metrics, ", "))
				}
			}
		}
		if n == 0 {
			return nil, fmt.Errorf("%w: %s: budget %d (%s) sets no limit", ErrBudget, name, i+1, glob)
		}
	}
	return b, nil
}

// checkBudget applies every limit to every tensor with statistics whose
// name matches, adding one check per tensor; a limit that matches no such
// tensor, and a tensor with statistics that no limit covers, are warnings.
// recomputed reports whether a tensor's statistics were recomputed from
// the source (and matched); a verdict on statistics that were not says so,
// since the manifest's own are only claims.
func checkBudget(rep *Report, m *manifest.Manifest, b *Budget, recomputed func(tensor string) bool) {
	used := make([]bool, len(b.Limits))
	var uncovered []string
	for _, e := range m.Tensors {
		if e.Stats == nil {
			continue
		}
		var over []string
		covered := false
		for i, l := range b.Limits {
			if ok, _ := convert.MatchGlob(l.Match, e.Name); !ok {
				continue
			}
			used[i], covered = true, true
			if v, ok := l.check(*e.Stats); !ok {
				over = append(over, fmt.Sprintf("%s %.6g beyond the limit %g (%s)", l.Metric, v, l.Value, l.Match))
			}
		}
		if !covered {
			uncovered = append(uncovered, e.Name)
			continue
		}
		again := recomputed(e.Name)
		detail := strings.Join(over, "; ")
		if !again {
			detail = strings.TrimPrefix(detail+"; "+NotRecomputed, "; ")
		}
		rep.add(CheckBudget, e.Name, len(over) == 0, "%s", detail)
		rep.Checks[len(rep.Checks)-1].Recomputed = &again
	}
	for i, l := range b.Limits {
		if !used[i] {
			rep.Warnings = append(rep.Warnings, fmt.Sprintf("budget %s matches no tensor with statistics", l))
		}
	}
	for _, name := range uncovered {
		rep.Warnings = append(rep.Warnings, fmt.Sprintf("tensor %q has statistics that no budget covers", name))
	}
}

// NotRecomputed ends the detail of a budget verdict on the manifest's own
// statistics.
const NotRecomputed = "statistics as the manifest records them, not recomputed (verify --against SRC recomputes them)"
