package testweights

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// IEEE 754 binary32, little-endian (common practice): 1.0 is 0x3f800000,
// -2.0 is 0xc0000000.
func TestF32Bytes(t *testing.T) {
	require.Equal(t, []byte{0, 0, 0x80, 0x3f, 0, 0, 0, 0xc0}, F32Bytes([]float32{1, -2}))
	require.Empty(t, F32Bytes(nil))
}

// A standard normal sample of 100,000 values has mean near 0 and standard
// deviation near 1 (common practice: the standard error of the mean is
// 1/√n ≈ 0.003), and the same seed gives the same values.
func TestGaussian(t *testing.T) {
	v := Gaussian(rand.New(rand.NewPCG(1, 2)), 100000)
	var sum, sq float64
	for _, x := range v {
		sum += float64(x)
		sq += float64(x) * float64(x)
	}
	mean := sum / float64(len(v))
	require.InDelta(t, 0, mean, 0.015)
	require.InDelta(t, 1, math.Sqrt(sq/float64(len(v))-mean*mean), 0.015)
	require.Equal(t, v[:10], Gaussian(rand.New(rand.NewPCG(1, 2)), 10))
}
