package convert

// blockMaximaAVX2 is blockMaximaGo over n elements, n a positive multiple
// of boundBlock (32) and at most boundChunk·boundBlock.
//
//go:noescape
func blockMaximaAVX2(w *float32, trits *int8, n int, c *boundConsts, out *[boundChunk]float64)
