package convert

import (
	"errors"
	"fmt"
	"testing"

	"github.com/stretchr/testify/assert"
)

func TestInputErrorMessage(t *testing.T) {
	detail := fmt.Errorf("%w: shape [3]", ErrOffsets)
	tests := []struct {
		name string
		err  *InputError
		want string
	}{
		{"all parts", &InputError{File: "m.safetensors", Tensor: "w", Offset: 120, Err: detail},
			`m.safetensors: tensor "w": byte 120: invalid data offsets: shape [3]`},
		{"no tensor", &InputError{File: "m.safetensors", Offset: 0, Err: ErrTruncated},
			`m.safetensors: byte 0: file truncated`},
		{"no offset", &InputError{File: "m.safetensors", Tensor: "a\"b", Offset: -1, Err: ErrDType},
			`m.safetensors: tensor "a\"b": unsupported dtype`},
		{"no detail", &InputError{File: "m.safetensors", Offset: -1},
			`m.safetensors: unknown error`},
	}
	for _, tc := range tests {
		assert.Equal(t, tc.want, tc.err.Error(), tc.name)
	}
	var err error = tests[0].err
	assert.True(t, errors.Is(err, ErrOffsets))
	assert.False(t, errors.Is(err, ErrHeader))
}
