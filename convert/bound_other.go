//go:build !amd64

package convert

func blockMaximaAVX2(*float32, *int8, int, *boundConsts, *[boundChunk]float64) { panic("unreachable") }

func blockMaximaBF16AVX2(*byte, *int8, int, *boundConsts, *[boundChunk]float64) { panic("unreachable") }
