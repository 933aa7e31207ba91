// Package testweights makes weights for the tests of several packages:
// Gaussian values from a seeded generator, and their bytes as a
// safetensors file stores F32.
package testweights

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
)

// Gaussian returns n values of a standard normal distribution from rng.
func Gaussian(rng *rand.Rand, n int) []float32 {
	v := make([]float32, n)
	for i := range v {
		v[i] = float32(rng.NormFloat64())
	}
	return v
}

// F32Bytes is v as little-endian F32.
func F32Bytes(v []float32) []byte {
	b := make([]byte, 4*len(v))
	for i, f := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(f))
	}
	return b
}
