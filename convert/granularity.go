package convert

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Granularity says how many weights share one scale. A tensor of shape
// [d0, d1, ...] is seen as a matrix of d0 rows (output rows) and
// d1×... columns (the input dimension); groups are runs of consecutive
// elements in C order.
type Granularity struct {
	Kind  string // GranTensor, GranRow or GranGroup
	Group int    // elements per group, for GranGroup
}

// Granularity kinds.
const (
	GranTensor = "tensor" // one scale for the tensor
	GranRow    = "row"    // one scale per output row
	GranGroup  = "group"  // one scale per N consecutive weights of a row
)

// ErrGranularity reports a granularity that is malformed or does not fit a
// tensor.
var ErrGranularity = errors.New("invalid granularity")

// PerTensor is the default granularity.
var PerTensor = Granularity{Kind: GranTensor}

// ParseGranularity reads "tensor", "row" or "group:N".
func ParseGranularity(s string) (Granularity, error) {
	switch {
	case s == GranTensor:
		return PerTensor, nil
	case s == GranRow:
		return Granularity{Kind: GranRow}, nil
	case strings.HasPrefix(s, GranGroup+":"):
		n, err := strconv.Atoi(strings.TrimPrefix(s, GranGroup+":"))
		if err != nil || n < 1 || n > math.MaxInt32 || GranGroup+":"+strconv.Itoa(n) != s {
			return Granularity{}, fmt.Errorf("%w %q: group size must be a positive decimal integer without sign or leading zero", ErrGranularity, s)
		}
		return Granularity{Kind: GranGroup, Group: n}, nil
	}
	return Granularity{}, fmt.Errorf("%w %q (want tensor, row or group:N)", ErrGranularity, s)
}

func (g Granularity) String() string {
	if g.Kind == GranGroup {
		return GranGroup + ":" + strconv.Itoa(g.Group)
	}
	return g.Kind
}

// MarshalText writes the granularity as ParseGranularity reads it.
func (g Granularity) MarshalText() ([]byte, error) { return []byte(g.String()), nil }

// UnmarshalText reads what MarshalText writes.
func (g *Granularity) UnmarshalText(b []byte) error {
	v, err := ParseGranularity(string(b))
	if err != nil {
		return err
	}
	*g = v
	return nil
}

// GroupSize is the number of consecutive elements that share a scale in a
// tensor of n elements and cols columns.
func (g Granularity) GroupSize(n, cols int) (int, error) {
	if n == 0 {
		return 0, nil
	}
	if cols < 1 || n%cols != 0 {
		return 0, fmt.Errorf("%w: %d elements do not form rows of %d", ErrGranularity, n, cols)
	}
	switch g.Kind {
	case GranTensor:
		return n, nil
	case GranRow:
		return cols, nil
	case GranGroup:
		if g.Group < 1 || cols%g.Group != 0 {
			return 0, fmt.Errorf("%w: %s needs the row length %d to be a multiple of %d", ErrGranularity, g, cols, g.Group)
		}
		return g.Group, nil
	}
	return 0, fmt.Errorf("%w %q", ErrGranularity, g.Kind)
}

// NumScales is the number of scales a tensor of n elements and cols
// columns has at this granularity (0 when the granularity does not fit).
func (g Granularity) NumScales(n, cols int) int {
	size, err := g.GroupSize(n, cols)
	if err != nil || size == 0 {
		return 0
	}
	return n / size
}

// Columns is the row length of a tensor seen as a matrix: the product of
// all dimensions but the first (1 for a 1-D tensor, 0 when one is 0).
func Columns(shape []int64) int {
	c := int64(1)
	for _, d := range shape[min(1, len(shape)):] {
		c *= d
	}
	return int(c)
}
