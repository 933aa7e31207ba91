package pack

// ReadOption sets a limit Open and NewReader apply to untrusted input.
type ReadOption func(*readLimits)

type readLimits struct {
	maxManifest int64
}

// MaxManifest caps the manifest length, checked in the trailer before the
// manifest is read or allocated; n <= 0 keeps DefaultMaxManifest. A longer
// manifest gives a *FormatError wrapping ErrStructure.
func MaxManifest(n int64) ReadOption {
	return func(l *readLimits) {
		if n > 0 {
			l.maxManifest = n
		}
	}
}

func applyReadOptions(opts []ReadOption) readLimits {
	l := readLimits{maxManifest: DefaultMaxManifest}
	for _, o := range opts {
		o(&l)
	}
	return l
}
