package convert

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// Sentinel errors callers branch on with errors.Is. Each typically indicates
// a corrupted or foreign input file.
var (
	// ErrTruncated reports a file shorter than its header says, or a data
	// section shorter than the tensor offsets need.
	ErrTruncated = errors.New("file truncated")
	// ErrHeader reports a bad header: bad length, over the cap, not UTF-8,
	// bad JSON, missing or extra fields, bad shape and the like.
	ErrHeader = errors.New("invalid header")
	// ErrOffsets reports data offsets with holes, overlaps or reversal, a
	// size that does not match shape × dtype, or trailing bytes.
	ErrOffsets = errors.New("invalid data offsets")
	// ErrDType reports a dtype this package does not know or cannot decode.
	ErrDType = errors.New("unsupported dtype")
	// ErrNonFinite reports a NaN or infinity where a finite value is needed.
	ErrNonFinite = errors.New("non-finite value")
)

// InputError locates a problem in a source file.
type InputError struct {
	File   string // path as given
	Tensor string // "" when not tensor-specific
	Offset int64  // absolute byte offset in File where the problem is, -1 if unknown
	Err    error  // wraps one of the sentinels, with detail
}

// Error formats the problem as `FILE: tensor "NAME": byte OFFSET: DETAIL`,
// leaving out the tensor and byte parts when they are absent.
func (e *InputError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Tensor != "" {
		b.WriteString(": tensor ")
		b.WriteString(strconv.Quote(e.Tensor))
	}
	if e.Offset >= 0 {
		b.WriteString(": byte ")
		b.WriteString(strconv.FormatInt(e.Offset, 10))
	}
	b.WriteString(": ")
	if e.Err != nil {
		b.WriteString(e.Err.Error())
	} else {
		b.WriteString("unknown error")
	}
	return b.String()
}

// Unwrap returns the wrapped error.
func (e *InputError) Unwrap() error { return e.Err }

// inputError builds an *InputError whose detail wraps sentinel.
func inputError(file, tensor string, offset int64, sentinel error, format string, args ...any) *InputError {
	return &InputError{
		File:   file,
		Tensor: tensor,
		Offset: offset,
		Err:    fmt.Errorf("%w: %s", sentinel, fmt.Sprintf(format, args...)),
	}
}
