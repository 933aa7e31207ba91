//go:build amd64

package treehash

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// The kernels with the AVX-512VL rotate give the chaining values of the
// AVX2 kernels and of the generic code, chunk by chunk and parent by
// parent, and whole hashes equal to github.com/zeebo/blake3's (an
// independent implementation).
func TestRotateKernelsMatch(t *testing.T) {
	if !haveRotate {
		t.Skip("this CPU lacks AVX2 or AVX-512VL: the kernels under test cannot run here")
	}
	saved := haveRotate
	defer func() { haveRotate = saved }()
	rng := rand.New(rand.NewPCG(5, 6))
	var in [8192]byte
	for trial := range 20 {
		for i := range in {
			in[i] = byte(rng.Uint32())
		}
		counter := rng.Uint64() >> uint(trial*3%64)
		want := eightCVsGeneric(&in, counter)
		for _, rot := range []bool{false, true} {
			haveRotate = rot
			require.Equal(t, want, eightCVs(&in, counter), "trial %d rotate %v", trial, rot)
		}
		for _, n := range []int{2, 6, 16, 30} {
			cvs := make([][8]uint32, n)
			for i := range cvs {
				for w := range cvs[i] {
					cvs[i][w] = rng.Uint32()
				}
			}
			wantP := parentsGeneric(append([][8]uint32(nil), cvs...))
			for _, rot := range []bool{false, true} {
				haveRotate = rot
				require.Equal(t, wantP, parents(append([][8]uint32(nil), cvs...)), "trial %d, %d cvs, rotate %v", trial, n, rot)
			}
		}
	}
	for _, n := range lengths {
		data := input(n)
		for _, rot := range []bool{false, true} {
			haveRotate = rot
			require.Equal(t, blake3.Sum256(data), Sum256(data, 2), "length %d rotate %v", n, rot)
		}
	}
}
