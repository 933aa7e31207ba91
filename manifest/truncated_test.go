package manifest

import (
	"testing"

	"github.com/stretchr/testify/require"
)

// A manifest of no bytes, or one cut short, is invalid (ErrInvalid), like
// any other malformed manifest: callers branch on the sentinel.
func TestDecodeTruncatedIsInvalid(t *testing.T) {
	for _, in := range []string{"", " ", `{"format"`, `{"format": "ternkit-artifact", "tensors": [`} {
		_, err := Decode([]byte(in))
		require.ErrorIs(t, err, ErrInvalid, "%q", in)
	}
}
