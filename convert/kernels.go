package convert

import (
	"encoding/binary"
	"math"
)

// The passes over a tensor's weights, written so that vector units can run
// them: every order of addition is fixed by lanes (element i of a run goes
// to lane i mod 16 or i mod 8), so the portable code below and the vector
// code of a platform (kernels_amd64.s) give the same bits. The tests hold
// each vector kernel to its portable twin.

// weights are a run of a tensor's values: float32, or little-endian BF16
// bytes (when bf16 is not nil) that the kernels widen as they load them, so
// that a BF16 tensor is read in place, at half the bytes of a float32 copy.
type weights struct {
	f32  []float32
	bf16 []byte
}

func (w weights) len() int {
	if w.bf16 != nil {
		return len(w.bf16) / 2
	}
	return len(w.f32)
}

func (w weights) slice(lo, hi int) weights {
	if w.bf16 != nil {
		return weights{bf16: w.bf16[2*lo : 2*hi]}
	}
	return weights{f32: w.f32[lo:hi]}
}

// at is weight i as a float32 (a BF16 value is the top half of one).
func (w weights) at(i int) float32 {
	if w.bf16 != nil {
		return math.Float32frombits(uint32(binary.LittleEndian.Uint16(w.bf16[2*i:])) << 16)
	}
	return w.f32[i]
}

// float32s returns the weights as float32 values, in buf when they must be
// widened (buf holds at least w.len() values).
func (w weights) float32s(buf []float32) []float32 {
	if w.bf16 == nil {
		return w.f32
	}
	buf = buf[:w.len()]
	decodeBF16Go(buf, w.bf16)
	return buf
}

// absLanes16 adds |w_i| and |w_i|² (float64) to s[i%16] and q[i%16], each
// lane in index order. A NaN or ±Inf weight makes its lane NaN or +Inf.
func absLanes16(w weights, s, q *[16]float64) {
	n := 0
	if useAVX2 {
		// in runs of kernelRun, a multiple of 16, so that lanes stay aligned
		for end := w.len() &^ 15; n < end; n += min(kernelRun, end-n) {
			m := min(kernelRun, end-n)
			if w.bf16 != nil {
				absLanes16BF16AVX2(&w.bf16[2*n], m, s, q)
			} else {
				absLanes16AVX2(&w.f32[n], m, s, q)
			}
		}
	}
	absLanes16Go(w.slice(n, w.len()), s, q) // n is a multiple of 16: w[n+i] goes to lane i%16
}

// kernelRun bounds the weights one kernel call takes: the runtime cannot
// stop a goroutine inside assembly, so a long call would hold up the
// garbage collector and every other goroutine waiting on it.
const kernelRun = 1 << 16

func absLanes16Go(w weights, s, q *[16]float64) {
	for i := range w.len() {
		a := float64(abs32(w.at(i)))
		s[i&15] += a
		q[i&15] += float64(a * a) // the conversion forbids a fused multiply-add
	}
}

// combineLanes16 is (t0 + t2) + (t1 + t3) with
// t_k = (p_k + p_(k+4)) + (p_(k+8) + p_(k+12)): see SumStrided16.
func combineLanes16(p *[16]float64) float64 {
	var t [4]float64
	for k := range t {
		t[k] = (p[k] + p[k+4]) + (p[k+8] + p[k+12])
	}
	return (t[0] + t[2]) + (t[1] + t[3])
}

// laneBlock is the run of weights whose statistics are gathered in float32
// lanes before they are added to the group's float64 totals.
const laneBlock = 512

// laneTotals are the quantize pass's totals over one block, element i of
// the block in lane i%8: Σ|w| over nonzero trits (float32, each lane in
// index order), the largest |w − scale·trit|, and counts. The layout is
// read by kernels_amd64.s.
type laneTotals struct {
	abs     [8]float32
	maxErr  [8]float32
	nonzero [8]int32
	tritSum [8]int32
	clipped [8]int32
}

// quantConsts are the float32 constants of one group, as the vector kernels
// read them.
type quantConsts struct {
	factor float32 // the multiplier (reciprocal form) or divisor (quotient form)
	th     float32 // t = +1 when x > th
	negTh  float32 // t = −1 when x < negTh
	clip   float32 // 1.5: |x| ≥ clip is clipped
	scale  float32
}

// quantizeBlock writes the trits of at most laneBlock weights v and adds
// their totals to l.
func quantizeBlock(v weights, trits []int8, q quantizer, l *laneTotals) {
	trits = trits[:v.len()]
	n := 0
	if useAVX2 {
		if n = v.len() &^ 7; n > 0 {
			c := quantConsts{factor: q.mul, th: q.threshold(), clip: 1.5, scale: q.scale}
			c.negTh = -c.th
			if !q.reciprocal {
				c.factor = q.div
			}
			switch {
			case v.bf16 != nil && q.reciprocal:
				quantMulBF16AVX2(&v.bf16[0], &trits[0], n, &c, l)
			case v.bf16 != nil:
				quantDivBF16AVX2(&v.bf16[0], &trits[0], n, &c, l)
			case q.reciprocal:
				quantMulAVX2(&v.f32[0], &trits[0], n, &c, l)
			default:
				quantDivAVX2(&v.f32[0], &trits[0], n, &c, l)
			}
		}
	}
	quantizeBlockGo(v.slice(n, v.len()), trits[n:], q, l) // n is a multiple of 8
}

// quantizeBlockGo is quantizeBlock without vector units: element i goes to
// lane i%8.
func quantizeBlockGo(v weights, trits []int8, q quantizer, l *laneTotals) {
	th, s := q.threshold(), q.scale
	trits = trits[:v.len()]
	for i := range v.len() {
		w := v.at(i)
		x := q.scaled(w)
		pos, neg := b2i32(x > th), b2i32(x < -th)
		j := i & 7
		trits[i] = int8(pos - neg)
		l.nonzero[j] += pos + neg
		l.tritSum[j] += pos - neg
		l.clipped[j] += b2i32(abs32(x) >= 1.5)
		// as the vector unit does it: a mask of the nonzero trits selects
		// |w| and the scale, and the largest error is e unless the lane
		// holds a greater value (the same as max, but for a NaN, which
		// never gets here from Ternarize)
		m, mask := abs32(w), uint32(-(pos + neg))
		l.abs[j] += math.Float32frombits(math.Float32bits(m) & mask)
		if e := abs32(m - math.Float32frombits(math.Float32bits(s)&mask)); !(l.maxErr[j] > e) {
			l.maxErr[j] = e
		}
	}
}

// addLanes adds a block's lane totals to g: the float32 sums combine as
// ((l0+l4) + (l2+l6)) + ((l1+l5) + (l3+l7)), then in float64.
func (g *groupTotals) addLanes(l *laneTotals) {
	for j := range 8 {
		g.nonzero += int64(l.nonzero[j])
		g.tritSum += int64(l.tritSum[j])
		g.clipped += int64(l.clipped[j])
		g.maxErr = max(g.maxErr, float64(l.maxErr[j]))
	}
	a := &l.abs
	g.absNonzero += float64(((a[0] + a[4]) + (a[2] + a[6])) + ((a[1] + a[5]) + (a[3] + a[7])))
}

func abs32(x float32) float32 { return math.Float32frombits(math.Float32bits(x) &^ (1 << 31)) }

func b2i32(b bool) int32 {
	if b {
		return 1
	}
	return 0
}

// decodeBF16 widens the little-endian BF16 values of raw (2 bytes each) to
// dst and reports whether any is NaN or ±Inf (exponent bits all set).
func decodeBF16(dst []float32, raw []byte) (nonFinite bool) {
	raw = raw[:2*len(dst)]
	n := 0
	if useAVX2 {
		for end := len(dst) &^ 7; n < end; n += min(kernelRun, end-n) {
			nonFinite = decodeBF16AVX2(&dst[n], &raw[2*n], min(kernelRun, end-n)) || nonFinite
		}
	}
	return decodeBF16Go(dst[n:], raw[2*n:]) || nonFinite
}

func decodeBF16Go(dst []float32, raw []byte) bool {
	var nonFinite uint32
	for i := range dst {
		b := uint32(raw[2*i]) | uint32(raw[2*i+1])<<8
		// ^b & 0x7f80 is 0 exactly when the exponent bits are all set, and
		// below 2^31, so one less has its top bit set exactly then
		nonFinite |= ((^b & 0x7f80) - 1) & 0x80000000
		dst[i] = math.Float32frombits(b << 16)
	}
	return nonFinite != 0
}
