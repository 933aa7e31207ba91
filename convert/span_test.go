package convert

import (
	"encoding/hex"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/outsidetool"
	"ternkit/internal/treehash"
)

// spanTensors are tensors at every place the tree has: smaller than a
// chunk, across chunk boundaries, across 4 MiB segment boundaries (d and
// f), and at the file's end (g, shorter than a chunk).
func spanTensors() []WriteTensor {
	rng := rand.New(rand.NewPCG(7, 11))
	sized := func(name string, n int) WriteTensor {
		b := make([]byte, n)
		for i := range b {
			b[i] = byte(rng.Uint32())
		}
		return u8(name, b...)
	}
	return []WriteTensor{
		sized("a", 1), sized("b", 700), sized("c", 3000), sized("d", SpanSegment+10_000),
		sized("e", 100), sized("f", 2*SpanSegment+777), u8("empty"), sized("g", 513),
	}
}

// writeSpanFile writes spanTensors with a header whose length is not a
// multiple of a chunk, and returns its path and bytes.
func writeSpanFile(t *testing.T) (string, []byte) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "vault.safetensors")
	for pad := 0; ; pad++ {
		md := map[string]string{"vault": "Fernmoss Seed Vault" + strings.Repeat(".", pad)}
		require.NoError(t, WriteFile(path, spanTensors(), md))
		b, err := os.ReadFile(path)
		require.NoError(t, err)
		s, err := Open(path)
		require.NoError(t, err)
		start := s.Tensors[0].Offset
		require.NoError(t, s.Close())
		if start%treehash.ChunkSize != 0 {
			return path, b
		}
	}
}

// spanByHasher is the source span identity computed another way: each
// complete subtree's chaining value from a treehash.Hasher started at its
// chunk number (bytes written, not a Subtree).
func spanByHasher(file []byte, a, b int64) [32]byte {
	h := blake3.New()
	h.Write([]byte("ternkit source span 1"))
	var n [8]byte
	for _, v := range []int64{a, b} {
		for i := range n {
			n[i] = byte(v >> (8 * i))
		}
		h.Write(n[:])
	}
	for s := a; s < b; {
		e := min(b, (s/(4<<20)+1)*(4<<20))
		c0 := min(e, (s+1023)/1024*1024)
		c1 := max(c0, e/1024*1024)
		h.Write(file[s:c0])
		for at := c0; at < c1; {
			size := int64(1024)
			for at%(2*size) == 0 && at+2*size <= c1 {
				size *= 2
			}
			sub := treehash.NewAt(uint64(at / 1024))
			sub.Write(file[at : at+size])
			cv := sub.CV()
			h.Write(cv[:])
			at += size
		}
		h.Write(file[c1:e])
		s = e
	}
	return [32]byte(h.Sum(nil))
}

// walkIDs walks path and returns each tensor's identity and the file's
// BLAKE3.
func walkIDs(t *testing.T, path string, workers int, budget int64, pieces bool) (map[string][32]byte, [32]byte) {
	t.Helper()
	s, err := Open(path)
	require.NoError(t, err)
	defer s.Close()
	ids := map[string][32]byte{}
	opts := WalkOptions{Workers: workers, Budget: budget}
	if pieces {
		opts.InPieces = func(tn *Tensor) bool { return tn.Name == "f" || tn.Name == "empty" || tn.Name == "a" }
		opts.Piece = func(tn *Tensor, _ int64, _ []byte, id *SourceID) error {
			if id != nil {
				ids[tn.Name] = id.Span
			}
			return nil
		}
	}
	err = WalkOrdered(s, opts,
		func(int, *Tensor, []byte) (struct{}, error) { return struct{}{}, nil },
		func(tn *Tensor, id SourceID, _ struct{}) error {
			ids[tn.Name] = id.Span
			return nil
		})
	require.NoError(t, err)
	require.Len(t, ids, len(s.Tensors))
	return ids, s.Files[0].BLAKE3
}

// The file's hash from the segments equals the BLAKE3 of the whole file by
// github.com/zeebo/blake3 (an independent implementation), and each
// tensor's identity equals SpanIdentity and the same rule computed another
// way, for any worker count, budget and pieces.
func TestWalkHashesMatchReference(t *testing.T) {
	path, file := writeSpanFile(t)
	want := blake3.Sum256(file)
	s, err := Open(path)
	require.NoError(t, err)
	tensors := s.Tensors
	require.NoError(t, s.Close())
	require.Equal(t, int64(len(file)), tensors[len(tensors)-1].Offset+tensors[len(tensors)-1].Length, "g ends the file")
	for _, workers := range []int{1, 2, 5} {
		for _, budget := range []int64{1, 1 << 30} {
			for _, pieces := range []bool{false, true} {
				ids, sum := walkIDs(t, path, workers, budget, pieces)
				require.Equal(t, want, sum, "workers %d budget %d pieces %v", workers, budget, pieces)
				for _, tn := range tensors {
					a, b := tn.Offset, tn.Offset+tn.Length
					require.Equal(t, SpanIdentity(file, a, b), ids[tn.Name], tn.Name)
					require.Equal(t, spanByHasher(file, a, b), ids[tn.Name], tn.Name)
				}
			}
		}
	}
}

// b3sum (Debian's b3sum, the BLAKE3 team's command-line tool) prints the
// file hash the walk records.
func TestWalkFileHashMatchesB3sum(t *testing.T) {
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	path, _ := writeSpanFile(t)
	_, sum := walkIDs(t, path, 2, 0, true)
	out, err := exec.Command(b3sum, "--no-names", path).Output()
	require.NoError(t, err)
	require.Equal(t, hex.EncodeToString(sum[:]), strings.TrimSpace(string(out)))
}

// One byte changed in a tensor changes its identity and no other's; the
// same bytes at another place give another identity.
func TestSpanIdentityFollowsBytesAndPlace(t *testing.T) {
	path, file := writeSpanFile(t)
	base, baseSum := walkIDs(t, path, 2, 0, false)
	s, err := Open(path)
	require.NoError(t, err)
	tensors := s.Tensors
	require.NoError(t, s.Close())
	for _, tn := range tensors {
		if tn.Length == 0 {
			continue
		}
		for _, at := range []int64{0, tn.Length / 2, tn.Length - 1} {
			changed := append([]byte(nil), file...)
			changed[tn.Offset+at] ^= 0x40
			require.NoError(t, os.WriteFile(path, changed, 0o644))
			ids, sum := walkIDs(t, path, 2, 0, false)
			require.NotEqual(t, baseSum, sum)
			for _, other := range tensors {
				if other == tn {
					require.NotEqual(t, base[other.Name], ids[other.Name], "%s byte %d", tn.Name, at)
				} else {
					require.Equal(t, base[other.Name], ids[other.Name], "%s byte %d changed %s", tn.Name, at, other.Name)
				}
			}
		}
	}
	require.NoError(t, os.WriteFile(path, file, 0o644))
	// the same bytes one byte further on
	tn := tensors[3]
	moved := append([]byte{0}, file...)
	require.NotEqual(t, SpanIdentity(file, tn.Offset, tn.Offset+tn.Length), SpanIdentity(moved, tn.Offset+1, tn.Offset+1+tn.Length))
}

// A file truncated while the walk has it mapped gives an *InputError
// naming the file, the tensor and an offset inside it, not a crash.
func TestWalkTruncatedWhileMapped(t *testing.T) {
	path := filepath.Join(t.TempDir(), "shrinking.safetensors")
	var ts []WriteTensor
	for i := range 4 {
		b := make([]byte, 256<<10)
		for j := range b {
			b[j] = byte(i + j)
		}
		ts = append(ts, u8(fmt.Sprintf("t%d", i), b...))
	}
	require.NoError(t, WriteFile(path, ts, nil))
	// whole tensors read by the worker, by a goroutine of work's own
	// through CatchFault, and tensors in pieces
	// (or through a FaultRelay, as the shared ternarization's helpers do)
	for _, mode := range []string{"whole", "goroutine", "relay", "pieces"} {
		pieces := mode == "pieces"
		require.NoError(t, WriteFile(path, ts, nil))
		s, err := Open(path)
		require.NoError(t, err)
		t1 := s.Tensors[1]
		truncate := func(tn *Tensor) error {
			if tn.Name == "t0" {
				return os.Truncate(path, t1.Offset+10)
			}
			return nil
		}
		// the budget lets one tensor in flight: t1 is handed out after t0
		// is emitted, and the file truncated
		opts := WalkOptions{Workers: 2, Budget: 1}
		if pieces {
			opts.InPieces = func(*Tensor) bool { return true }
			opts.Piece = func(tn *Tensor, _ int64, _ []byte, id *SourceID) error {
				if id != nil {
					return truncate(tn)
				}
				return nil
			}
		}
		err = WalkOrdered(s, opts,
			func(_ int, tn *Tensor, raw []byte) (int, error) {
				n := 0
				sum := func() {
					for _, b := range raw {
						n += int(b)
					}
				}
				if mode == "relay" {
					var relay FaultRelay
					var wg sync.WaitGroup
					wg.Add(1)
					go func() {
						defer wg.Done()
						relay.Run(sum)
					}()
					wg.Wait()
					relay.Raise()
					return n, nil
				}
				if mode != "goroutine" {
					sum()
					return n, nil
				}
				done := make(chan error)
				go func() { done <- CatchFault(sum) }()
				return n, <-done
			},
			func(tn *Tensor, _ SourceID, _ int) error { return truncate(tn) })
		var ie *InputError
		require.ErrorAs(t, err, &ie, mode)
		require.True(t, errors.Is(err, ErrTruncated), "%v", err)
		require.Equal(t, path, ie.File)
		require.Equal(t, "t1", ie.Tensor)
		require.True(t, ie.Offset >= t1.Offset+10 && ie.Offset < t1.Offset+t1.Length, "offset %d", ie.Offset)
		require.NoError(t, s.Close())
	}
}

// The plain BLAKE3 of each tensor's bytes, asked for with Plain and joined
// from the same segments, equals github.com/zeebo/blake3 over the bytes,
// whole tensors and tensors in pieces alike.
func TestWalkPlainMatchesReference(t *testing.T) {
	path, file := writeSpanFile(t)
	for _, workers := range []int{1, 3} {
		for _, pieces := range []bool{false, true} {
			s, err := Open(path)
			require.NoError(t, err)
			plains := map[string][32]byte{}
			record := func(tn *Tensor, id *SourceID) {
				require.NotNil(t, id.Plain, tn.Name)
				plains[tn.Name] = *id.Plain
			}
			opts := WalkOptions{Workers: workers, Plain: func(tn *Tensor) bool { return tn.Name != "c" }}
			if pieces {
				opts.InPieces = func(tn *Tensor) bool { return tn.Name == "f" || tn.Name == "empty" || tn.Name == "d" }
				opts.Piece = func(tn *Tensor, _ int64, _ []byte, id *SourceID) error {
					if id != nil {
						record(tn, id)
					}
					return nil
				}
			}
			err = WalkOrdered(s, opts,
				func(int, *Tensor, []byte) (struct{}, error) { return struct{}{}, nil },
				func(tn *Tensor, id SourceID, _ struct{}) error {
					if tn.Name == "c" {
						require.Nil(t, id.Plain)
						return nil
					}
					record(tn, &id)
					return nil
				})
			require.NoError(t, err)
			for _, tn := range s.Tensors {
				if tn.Name != "c" {
					require.Equal(t, blake3.Sum256(file[tn.Offset:tn.Offset+tn.Length]), plains[tn.Name], "%s workers %d pieces %v", tn.Name, workers, pieces)
				}
			}
			require.NoError(t, s.Close())
		}
	}
}
