package convert

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestDefaultLimits(t *testing.T) {
	d := DefaultLimits()
	// The safetensors format description caps the header length at
	// 100,000,000 bytes in its reference reader.
	assert.Equal(t, int64(100_000_000), d.MaxHeaderBytes)
	assert.Equal(t, 1<<20, d.MaxTensors)
	assert.Equal(t, d, Limits{}.withDefaults(), "zero fields take the defaults")
	assert.Equal(t, Limits{MaxHeaderBytes: 5, MaxTensors: d.MaxTensors}, Limits{MaxHeaderBytes: 5}.withDefaults())
}

// Each limit refuses the first input over it, with an *InputError naming
// the file and the byte offset, and accepts the input at it.
func TestOpenLimited(t *testing.T) {
	two := `{"a":{"dtype":"U8","shape":[1],"data_offsets":[0,1]},"b":{"dtype":"U8","shape":[1],"data_offsets":[1,2]}}`
	single := writeTemp(t, "two.safetensors", stFile(two, []byte{1, 2}))
	set := t.TempDir()
	writeShards(t, set, threeShards())
	index := filepath.Join(set, "model.safetensors.index.json")
	require.NoError(t, os.WriteFile(index, []byte(threeShardIndex), 0o644))

	tests := []struct {
		name     string
		path     string
		lim      Limits
		sentinel error // nil: opens
		file     string
		offset   int64
		message  string
	}{
		{"header at the cap", single, Limits{MaxHeaderBytes: paddedLen(two)}, nil, "", 0, ""},
		{"header over the cap", single, Limits{MaxHeaderBytes: paddedLen(two) - 1}, ErrHeader, single, 0, "exceeds the cap of"},
		{"tensors at the limit", single, Limits{MaxTensors: 2}, nil, "", 0, ""},
		{"tensors over the limit", single, Limits{MaxTensors: 1}, ErrHeader, single, headerStart + int64(strings.Index(two, `"b"`)), "more than 1 tensors, over the limit"},
		{"set at the limit", index, Limits{MaxTensors: 4}, nil, "", 0, ""},
		{"set over the limit", index, Limits{MaxTensors: 3}, ErrHeader, filepath.Join(set, "model-00003-of-00003.safetensors"), -1, "the set holds more than 3 tensors"},
		{"index over the cap", index, Limits{MaxHeaderBytes: int64(len(threeShardIndex)) - 1}, ErrIndex, index, 0, "over the cap of"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, err := OpenLimited(tc.path, tc.lim)
			if tc.sentinel == nil {
				require.NoError(t, err)
				s.Close()
				return
			}
			require.ErrorIs(t, err, tc.sentinel)
			var ie *InputError
			require.True(t, errors.As(err, &ie))
			assert.Equal(t, tc.file, ie.File)
			assert.Equal(t, tc.offset, ie.Offset)
			assert.Contains(t, err.Error(), tc.message)
		})
	}
}
