package tritmat

import (
	"errors"
	"math/rand/v2"
	"testing"

	"ternkit/internal/asmcheck"
	"ternkit/pack"
)

func randomTrits(rng *rand.Rand, n int) []int8 {
	t := make([]int8, n)
	for i := range t {
		t[i] = int8(rng.IntN(3)) - 1
	}
	return t
}

func randomInt8(rng *rand.Rand, n int) []int8 {
	x := make([]int8, n)
	for i := range x {
		x[i] = int8(rng.IntN(256) - 128)
	}
	return x
}

// TestMulInt8Definition checks MulInt8 against the definition summed
// element by element, on payloads written by the artifact's own encoder
// (pack.Codec), for both codecs, shapes whose rows start mid-byte, and
// every group size that divides the row.
func TestMulInt8Definition(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, codec := range []string{Bits2, Base3} {
		for _, shape := range [][2]int{{1, 1}, {3, 7}, {5, 13}, {4, 12}, {9, 40}, {2, 70000}, {300, 256}} {
			rows, cols := shape[0], shape[1]
			trits := randomTrits(rng, rows*cols)
			m := Matrix{Codec: codec, Data: pack.Codec(codec).Encode(nil, trits), Rows: rows, Cols: cols}
			const ntok = 3
			x := randomInt8(rng, ntok*cols)
			x[0] = -128 // the extreme code
			for _, group := range []int{0, 1, cols} {
				if group == 1 && cols > 1000 {
					continue
				}
				g := group
				if g == 0 {
					g = cols
				}
				groups := cols / g
				dst := make([]int32, ntok*rows*groups)
				if err := MulInt8(dst, m, group, x, ntok); err != nil {
					t.Fatal(err)
				}
				for tok := range ntok {
					for r := range rows {
						for j := range groups {
							var want int32
							for c := j * g; c < (j+1)*g; c++ {
								want += int32(trits[r*cols+c]) * int32(x[tok*cols+c])
							}
							if got := dst[tok*rows*groups+r*groups+j]; got != want {
								t.Fatalf("%s %dx%d group %d token %d row %d sum %d: %d, want %d", codec, rows, cols, g, tok, r, j, got, want)
							}
						}
					}
				}
			}
		}
	}
}

// TestMulInt8HandWorked: the worked example of the format's bits2 codec
// (pack/FORMAT.md): trits +1 −1 0 +1 −1 are bytes 0x49 0x02; as a 1 × 5
// matrix times x = (10, 20, 30, 40, 50): 10 − 20 + 0 + 40 − 50 = −20. In
// base3 the same trits are the byte 196.
func TestMulInt8HandWorked(t *testing.T) {
	x := []int8{10, 20, 30, 40, 50}
	for _, m := range []Matrix{
		{Codec: Bits2, Data: []byte{0x49, 0x02}, Rows: 1, Cols: 5},
		{Codec: Base3, Data: []byte{196}, Rows: 1, Cols: 5},
	} {
		dst := make([]int32, 1)
		if err := MulInt8(dst, m, 0, x, 1); err != nil {
			t.Fatal(err)
		}
		if dst[0] != -20 {
			t.Errorf("%s: %d, want -20", m.Codec, dst[0])
		}
	}
}

func TestMulInt8Rejects(t *testing.T) {
	x := make([]int8, 4)
	for _, tc := range []struct {
		name string
		m    Matrix
	}{
		{"bits2 code 3", Matrix{Codec: Bits2, Data: []byte{0x03}, Rows: 1, Cols: 4}},
		{"base3 byte 243", Matrix{Codec: Base3, Data: []byte{243}, Rows: 1, Cols: 4}},
		{"short payload", Matrix{Codec: Base3, Data: nil, Rows: 1, Cols: 4}},
		{"unknown codec", Matrix{Codec: "entropy", Data: []byte{0}, Rows: 1, Cols: 4}},
	} {
		err := MulInt8(make([]int32, 1), tc.m, 0, x, 1)
		if !errors.Is(err, ErrInvalid) {
			t.Errorf("%s: %v, want ErrInvalid", tc.name, err)
		}
	}
	m := Matrix{Codec: Bits2, Data: []byte{0}, Rows: 1, Cols: 4}
	if err := MulInt8(make([]int32, 1), m, 3, x, 1); !errors.Is(err, ErrInvalid) {
		t.Errorf("group 3 of 4 columns: %v", err)
	}
}

// TestDotMatchesPortable holds the vector Dot to its portable twin for
// every length 0..600 and the extreme values.
func TestDotMatchesPortable(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for n := range 601 {
		a, b := randomInt8(rng, n), randomInt8(rng, n)
		if got, want := Dot(a, b), DotPortable(a, b); got != want {
			t.Fatalf("length %d: %d, portable %d", n, got, want)
		}
		for i := range a {
			a[i], b[i] = -128, -128
		}
		if got, want := Dot(a, b), DotPortable(a, b); got != want || want != int32(n)*16384 {
			t.Fatalf("length %d of -128: %d, portable %d, want %d", n, got, want, n*16384)
		}
	}
}

func TestNoLegacySSEMoves(t *testing.T) {
	found, err := asmcheck.LegacySSEMoves(".")
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range found {
		t.Errorf("legacy SSE move in AVX code: %s", f)
	}
}

func FuzzDot(f *testing.F) {
	f.Add([]byte{1, 2, 3}, []byte{255, 128, 7})
	f.Fuzz(func(t *testing.T, a, b []byte) {
		ai, bi := make([]int8, len(a)), make([]int8, len(b))
		for i := range a {
			ai[i] = int8(a[i])
		}
		for i := range b {
			bi[i] = int8(b[i])
		}
		if got, want := Dot(ai, bi), DotPortable(ai, bi); got != want {
			t.Fatalf("%d, portable %d", got, want)
		}
	})
}

// TestMulInt8RowsSplit: any split of the rows gives MulInt8's sums.
func TestMulInt8RowsSplit(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	rows, cols, ntok := 37, 23, 2
	trits := randomTrits(rng, rows*cols)
	m := Matrix{Codec: Base3, Data: pack.Codec(Base3).Encode(nil, trits), Rows: rows, Cols: cols}
	x := randomInt8(rng, ntok*cols)
	whole := make([]int32, ntok*rows)
	if err := MulInt8(whole, m, 0, x, ntok); err != nil {
		t.Fatal(err)
	}
	for _, split := range []int{0, 1, 18, 36, 37} {
		for _, part := range [][2]int{{0, split}, {split, rows}} {
			n := part[1] - part[0]
			dst := make([]int32, ntok*n)
			if err := MulInt8Rows(dst, m, 0, x, ntok, part[0], part[1]); err != nil {
				t.Fatal(err)
			}
			for tok := range ntok {
				for r := range n {
					if dst[tok*n+r] != whole[tok*rows+part[0]+r] {
						t.Fatalf("rows %v token %d row %d: %d, want %d", part, tok, r, dst[tok*n+r], whole[tok*rows+part[0]+r])
					}
				}
			}
		}
	}
}
