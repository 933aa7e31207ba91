package alloccount

import "testing"

var sink []byte

func TestBytes(t *testing.T) {
	for _, n := range []int{1 << 16, 1 << 20, 8 << 20} {
		got := Bytes(func() { sink = make([]byte, n) })
		if got < uint64(n) || got > uint64(n)+1<<16 {
			t.Errorf("make([]byte, %d) counted as %d bytes", n, got)
		}
	}
	if got := Bytes(func() {}); got > 1<<16 {
		t.Errorf("an empty call counted as %d bytes", got)
	}
}
