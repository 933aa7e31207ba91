package pack

import "testing"

// BenchmarkTritCounter reports, per codec and tensor, counting throughput
// in trits/s (SetBytes is the trit count), writing the payload in pieces
// of manifest.ChunkSize as verify streams it. BenchmarkCodecDecode beside
// it is the peer: counting should beat decoding.
func BenchmarkTritCounter(b *testing.B) {
	const piece = 1 << 22
	for _, bt := range benchTensors(b) {
		for _, c := range Codecs {
			p := c.Encode(nil, bt.trits)
			b.Run(string(c)+"/"+bt.name, func(b *testing.B) {
				b.SetBytes(int64(len(bt.trits)))
				for b.Loop() {
					tc, err := NewTritCounter(c, int64(len(bt.trits)))
					if err != nil {
						b.Fatal(err)
					}
					for rest := p; len(rest) > 0; rest = rest[min(len(rest), piece):] {
						if _, err := tc.Write(rest[:min(len(rest), piece)]); err != nil {
							b.Fatal(err)
						}
					}
					if _, err := tc.Close(); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
