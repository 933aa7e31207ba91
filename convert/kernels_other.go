//go:build !amd64

package convert

// Without vector kernels the portable code runs; these are never called.
const useAVX2 = false

func absLanes16AVX2(*float32, int, *[16]float64, *[16]float64)      { panic("unreachable") }
func quantMulAVX2(*float32, *int8, int, *quantConsts, *laneTotals)  { panic("unreachable") }
func quantDivAVX2(*float32, *int8, int, *quantConsts, *laneTotals)  { panic("unreachable") }
func decodeBF16AVX2(*float32, *byte, int) bool                      { panic("unreachable") }
func absLanes16BF16AVX2(*byte, int, *[16]float64, *[16]float64)     { panic("unreachable") }
func quantMulBF16AVX2(*byte, *int8, int, *quantConsts, *laneTotals) { panic("unreachable") }
func quantDivBF16AVX2(*byte, *int8, int, *quantConsts, *laneTotals) { panic("unreachable") }
