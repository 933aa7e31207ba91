package pack

import (
	"errors"
	"fmt"
	"os"

	"ternkit/convert"
)

// ErrOutputIsInput reports a destination that is one of the files Build
// reads: the source checkpoint (a file, a shard or the index) or a
// companion. Replacing it would destroy an input of the build.
var ErrOutputIsInput = errors.New("output is an input of the build")

// checkDestination refuses a dst that names the same existing file as
// one of the source's files or the companions (symbolic links followed).
func checkDestination(src *convert.Source, dst string, companions []Companion) error {
	st, err := os.Stat(dst)
	if err != nil {
		return nil // nothing there yet: it cannot be an input
	}
	inputs := []string{src.Path}
	for _, f := range src.Files {
		inputs = append(inputs, f.Path)
	}
	for _, c := range companions {
		inputs = append(inputs, c.Path)
	}
	for _, p := range inputs {
		if pst, err := os.Stat(p); err == nil && os.SameFile(st, pst) {
			return fmt.Errorf("%w: %s is the same file as %s; write the artifact elsewhere", ErrOutputIsInput, dst, p)
		}
	}
	return nil
}
