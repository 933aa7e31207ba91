package tritmat

import (
	"encoding/hex"
	"encoding/json"
	"flag"
	"math/rand/v2"
	"os"
	"slices"
	"testing"

	"ternkit/pack"
)

var updateVectors = flag.Bool("update-vectors", false, "rewrite testdata/mulint8_vectors.json")

// vector is one case of testdata/mulint8_vectors.json, for runtimes in
// other languages: the packed matrix, the activations of ntok tokens, the
// group size (0: one sum per row) and the int32 sums MulInt8 must give.
type vector struct {
	Name    string  `json:"name"`
	Codec   string  `json:"codec"`
	Rows    int     `json:"rows"`
	Cols    int     `json:"cols"`
	Group   int     `json:"group"`
	Payload string  `json:"payload_hex"`
	Tokens  int     `json:"tokens"`
	X       []int8  `json:"x"`
	Y       []int32 `json:"y"`
}

// makeVectors builds the cases; the sums come from the definition, summed
// element by element, and the payloads from the artifact's encoder.
func makeVectors() []vector {
	rng := rand.New(rand.NewPCG(17, 17))
	var vs []vector
	add := func(name, codec string, rows, cols, group, ntok int, trits, x []int8) {
		g := group
		if g == 0 {
			g = cols
		}
		var y []int32
		for t := range ntok {
			for r := range rows {
				for j := 0; j < cols; j += g {
					var s int32
					for c := j; c < j+g; c++ {
						s += int32(trits[r*cols+c]) * int32(x[t*cols+c])
					}
					y = append(y, s)
				}
			}
		}
		vs = append(vs, vector{name, codec, rows, cols, group, hex.EncodeToString(pack.Codec(codec).Encode(nil, trits)), ntok, x, y})
	}
	// the format's worked example: trits +1 −1 0 +1 −1
	ex := []int8{1, -1, 0, 1, -1}
	add("worked example bits2", Bits2, 1, 5, 0, 1, ex, []int8{10, 20, 30, 40, 50})
	add("worked example base3", Base3, 1, 5, 0, 1, ex, []int8{10, 20, 30, 40, 50})
	for _, c := range []struct {
		name                    string
		rows, cols, group, ntok int
	}{
		{"rows start mid-byte", 3, 7, 0, 1},
		{"groups of 3", 4, 6, 3, 2},
		{"extreme codes, 2 tokens", 2, 33, 0, 2},
		{"one column", 5, 1, 0, 1},
		{"a wide row past 32 (the vector width)", 2, 70, 35, 1},
	} {
		trits := randomTrits(rng, c.rows*c.cols)
		x := randomInt8(rng, c.ntok*c.cols)
		if c.name == "extreme codes, 2 tokens" {
			for i := range x {
				x[i] = -128
				if i%3 == 0 {
					x[i] = 127
				}
			}
		}
		for _, codec := range []string{Bits2, Base3} {
			add(c.name+" "+codec, codec, c.rows, c.cols, c.group, c.ntok, trits, x)
		}
	}
	return vs
}

// TestVectorsFile holds MulInt8 to testdata/mulint8_vectors.json and the
// file to the definition (rewrite it with -update-vectors).
func TestVectorsFile(t *testing.T) {
	const path = "testdata/mulint8_vectors.json"
	want := makeVectors()
	if *updateVectors {
		data := []byte("[\n")
		for i, v := range want {
			line, _ := json.Marshal(v)
			data = append(data, line...)
			if i < len(want)-1 {
				data = append(data, ',')
			}
			data = append(data, '\n')
		}
		data = append(data, "]\n"...)
		if err := os.WriteFile(path, data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var vs []vector
	if err := json.Unmarshal(data, &vs); err != nil {
		t.Fatal(err)
	}
	if len(vs) != len(want) {
		t.Fatalf("%s holds %d cases, the definition %d: rerun with -update-vectors", path, len(vs), len(want))
	}
	for i, v := range vs {
		if !slices.Equal(v.Y, want[i].Y) || v.Payload != want[i].Payload {
			t.Errorf("%s: case %q differs from the definition", path, v.Name)
		}
		payload, err := hex.DecodeString(v.Payload)
		if err != nil {
			t.Fatal(err)
		}
		y := make([]int32, len(v.Y))
		if err := MulInt8(y, Matrix{Codec: v.Codec, Data: payload, Rows: v.Rows, Cols: v.Cols}, v.Group, v.X, v.Tokens); err != nil {
			t.Fatalf("%q: %v", v.Name, err)
		}
		if !slices.Equal(y, v.Y) {
			t.Errorf("%q: MulInt8 gives %v, want %v", v.Name, y, v.Y)
		}
	}
}
