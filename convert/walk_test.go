package convert

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"
)

// WalkOrdered hands every tensor of a sharded set to a worker once, with its
// bytes and their source span identity, emits in tensor order for any worker count and
// any budget (a budget below the largest tensor included), and records
// each file's BLAKE3 (the zeebo/blake3 library over the whole file:
// what b3sum prints, checked against b3sum in cmd/ternkit's tests).
func TestWalkOrdered(t *testing.T) {
	dir := t.TempDir()
	big := bytes.Repeat([]byte{0xa5, 0x5a, 7}, 70_000)
	writeShards(t, dir, []shardSpec{
		{"model-00001-of-00003.safetensors", []WriteTensor{u8("a", 1, 2), u8("empty"), u8("big", big...)}, nil},
		{"model-00002-of-00003.safetensors", []WriteTensor{u8("c", 4, 5, 6)}, nil},
		{"model-00003-of-00003.safetensors", []WriteTensor{u8("d", 7), u8("big2", big[:100_001]...)}, nil},
	})
	index := `{"weight_map":{"a":"model-00001-of-00003.safetensors","empty":"model-00001-of-00003.safetensors",` +
		`"big":"model-00001-of-00003.safetensors","c":"model-00002-of-00003.safetensors",` +
		`"d":"model-00003-of-00003.safetensors","big2":"model-00003-of-00003.safetensors"}}`
	require.NoError(t, os.WriteFile(filepath.Join(dir, "model.safetensors.index.json"), []byte(index), 0o644))
	for _, workers := range []int{1, 2, 5} {
		for _, budget := range []int64{1, 1000, 1 << 30} {
			s, err := Open(dir)
			require.NoError(t, err)
			var mu sync.Mutex
			seen := map[string]int{}
			var order []string
			files := map[string][]byte{}
			for _, f := range s.Files {
				b, err := os.ReadFile(f.Path)
				require.NoError(t, err)
				files[f.Path] = b
			}
			identity := func(tn *Tensor) [32]byte {
				return SpanIdentity(files[tn.File], tn.Offset, tn.Offset+tn.Length)
			}
			// "big" and "empty" come in pieces, the segments of their bytes
			var pieced []byte
			opts := WalkOptions{Workers: workers, Budget: budget,
				InPieces: func(tn *Tensor) bool { return tn.Name == "big" || tn.Name == "empty" },
				Piece: func(tn *Tensor, off int64, p []byte, id *SourceID) error {
					require.Equal(t, int64(len(pieced)), off, tn.Name)
					at := tn.Offset + off
					require.LessOrEqual(t, at+int64(len(p)), at/SpanSegment*SpanSegment+SpanSegment, "%s: a piece stays within a segment", tn.Name)
					pieced = append(pieced, p...)
					if id != nil {
						require.Equal(t, tn.Length, int64(len(pieced)), tn.Name)
						require.True(t, bytes.Equal(files[tn.File][tn.Offset:tn.Offset+tn.Length], pieced), tn.Name)
						require.Equal(t, identity(tn), id.Span, tn.Name)
						mu.Lock()
						seen[tn.Name]++
						mu.Unlock()
						order = append(order, tn.Name)
						pieced = nil
					}
					return nil
				}}
			err = WalkOrdered(s, opts,
				func(w int, tn *Tensor, raw []byte) (string, error) {
					require.True(t, w >= 0 && w < workers)
					require.NotContains(t, []string{"big", "empty"}, tn.Name, "in pieces, not whole")
					require.Equal(t, files[tn.File][tn.Offset:tn.Offset+tn.Length], raw, tn.Name)
					mu.Lock()
					seen[tn.Name]++
					mu.Unlock()
					return fmt.Sprintf("%s:%d", tn.Name, len(raw)), nil
				},
				func(tn *Tensor, id SourceID, r string) error {
					require.Equal(t, fmt.Sprintf("%s:%d", tn.Name, tn.Length), r)
					require.Equal(t, identity(tn), id.Span, tn.Name)
					order = append(order, tn.Name)
					return nil
				})
			require.NoError(t, err)
			var want []string
			for _, tn := range s.Tensors {
				want = append(want, tn.Name)
				require.Equal(t, 1, seen[tn.Name], tn.Name)
			}
			require.Equal(t, want, order, "workers %d budget %d", workers, budget)
			for _, f := range s.Files {
				b, err := os.ReadFile(f.Path)
				require.NoError(t, err)
				require.Equal(t, blake3.Sum256(b), f.BLAKE3, "%s, workers %d budget %d", filepath.Base(f.Path), workers, budget)
			}
			require.NoError(t, s.Close())
		}
	}
}

// The first error in tensor order stops the walk and is returned, whatever
// order the workers finish in; emit sees only the tensors before it.
func TestWalkOrderedFirstError(t *testing.T) {
	dir := t.TempDir()
	var ts []WriteTensor
	for i := range 20 {
		ts = append(ts, u8(fmt.Sprintf("t%02d", i), byte(i)))
	}
	writeShards(t, dir, []shardSpec{{"model.safetensors", ts, nil}})
	s, err := Open(filepath.Join(dir, "model.safetensors"))
	require.NoError(t, err)
	defer s.Close()
	var emitted []string
	err = WalkOrdered(s, WalkOptions{Workers: 4},
		func(_ int, tn *Tensor, _ []byte) (int, error) {
			if tn.Name == "t07" || tn.Name == "t13" {
				return 0, fmt.Errorf("bad %s", tn.Name)
			}
			return 0, nil
		},
		func(tn *Tensor, _ SourceID, _ int) error {
			emitted = append(emitted, tn.Name)
			return nil
		})
	require.EqualError(t, err, "bad t07")
	require.Equal(t, []string{"t00", "t01", "t02", "t03", "t04", "t05", "t06"}, emitted)
}
