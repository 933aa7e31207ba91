package manifest

import (
	"runtime"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// A manifest nested deeper than MaxDepth is refused, and reading it costs
// memory linear in its size: a walk that built a path string per level
// took 645 MiB for 45 KB of '['.
func TestDecodeRejectsDeepNesting(t *testing.T) {
	for _, n := range []int{MaxDepth + 1, 30_000, 45_000} {
		for _, where := range []string{`{"tensors":%s}`, `{"source":{"metadata":%s}}`, `%s`} {
			deep := strings.Replace(where, "%s", strings.Repeat("[", n)+strings.Repeat("]", n), 1)
			var before, after runtime.MemStats
			runtime.GC()
			runtime.ReadMemStats(&before)
			_, err := Decode([]byte(deep))
			runtime.ReadMemStats(&after)
			require.ErrorIs(t, err, ErrInvalid)
			if n > MaxDepth {
				require.Contains(t, err.Error(), "nested more than 64 levels deep", where)
			}
			allocated := after.TotalAlloc - before.TotalAlloc
			require.Less(t, allocated, uint64(1<<20+64*len(deep)), "%d levels: %d bytes allocated", n, allocated)
		}
	}
	// at the limit, the nesting itself is no error (the shape is)
	ok := `{"source":{"metadata":` + strings.Repeat("[", MaxDepth-2) + strings.Repeat("]", MaxDepth-2) + `}}`
	_, err := Decode([]byte(ok))
	require.ErrorIs(t, err, ErrInvalid)
	require.NotContains(t, err.Error(), "nested")
}
