package convert

// Limits bound what Open accepts from an untrusted checkpoint. Each is
// checked before the memory it guards is allocated. A zero field takes its
// default from DefaultLimits.
type Limits struct {
	// MaxHeaderBytes caps a safetensors header length N and the size of a
	// sharded set's index file.
	MaxHeaderBytes int64
	// MaxTensors caps the tensors of one file and of a whole sharded set.
	MaxTensors int
}

// DefaultLimits are the limits Open uses: the reference reader's cap of
// 100,000,000 header bytes (the safetensors format description) and 2^20
// tensors, far more than any released model holds.
func DefaultLimits() Limits {
	return Limits{MaxHeaderBytes: maxHeaderLen, MaxTensors: 1 << 20}
}

// withDefaults fills the zero fields of l from DefaultLimits.
func (l Limits) withDefaults() Limits {
	d := DefaultLimits()
	if l.MaxHeaderBytes <= 0 {
		l.MaxHeaderBytes = d.MaxHeaderBytes
	}
	if l.MaxTensors <= 0 {
		l.MaxTensors = d.MaxTensors
	}
	return l
}
