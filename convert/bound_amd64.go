package convert

// blockMaximaAVX2 is blockMaximaGo over n elements, n a positive multiple
// of boundBlock (32) and at most boundChunk·boundBlock.
//
//go:noescape
func blockMaximaAVX2(w *float32, trits *int8, n int, c *boundConsts, out *[boundChunk]float64)

// blockMaximaBF16AVX2 is blockMaximaAVX2 over little-endian BF16 weights.
//
//go:noescape
func blockMaximaBF16AVX2(w *byte, trits *int8, n int, c *boundConsts, out *[boundChunk]float64)
