package convert

import "golang.org/x/sys/cpu"

// useAVX2 selects the vector kernels of kernels_amd64.s.
var useAVX2 = cpu.X86.HasAVX2

// absLanes16AVX2 is absLanes16Go over n weights, n a positive multiple of 16.
//
//go:noescape
func absLanes16AVX2(w *float32, n int, s, q *[16]float64)

// quantMulAVX2 is quantizeBlockGo (reciprocal form: x = w × c.factor) over
// n weights, n a positive multiple of 8.
//
//go:noescape
func quantMulAVX2(w *float32, trits *int8, n int, c *quantConsts, l *laneTotals)

// quantDivAVX2 is quantMulAVX2 for the quotient form: x = w / c.factor.
//
//go:noescape
func quantDivAVX2(w *float32, trits *int8, n int, c *quantConsts, l *laneTotals)

// decodeBF16AVX2 widens n BF16 values (n a positive multiple of 8) to
// float32 and reports whether any is NaN or ±Inf.
//
//go:noescape
func decodeBF16AVX2(dst *float32, src *byte, n int) (nonFinite bool)

// absLanes16BF16AVX2 is absLanes16AVX2 over n little-endian BF16 weights.
//
//go:noescape
func absLanes16BF16AVX2(w *byte, n int, s, q *[16]float64)

// quantMulBF16AVX2 is quantMulAVX2 over n little-endian BF16 weights.
//
//go:noescape
func quantMulBF16AVX2(w *byte, trits *int8, n int, c *quantConsts, l *laneTotals)

// quantDivBF16AVX2 is quantDivAVX2 over n little-endian BF16 weights.
//
//go:noescape
func quantDivBF16AVX2(w *byte, trits *int8, n int, c *quantConsts, l *laneTotals)
