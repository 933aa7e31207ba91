package convert

import (
	"bytes"
	"encoding/binary"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// stFile lays out a safetensors file as the published format description
// gives it: an 8-byte little-endian header length N, N bytes of JSON header
// (padded with spaces to a multiple of 8, as writers commonly do), then the
// data section.
func stFile(header string, data []byte) []byte {
	if pad := len(header) % 8; pad != 0 {
		header += strings.Repeat(" ", 8-pad)
	}
	return rawFile(uint64(len(header)), header, data)
}

// rawFile lays out a file with an arbitrary length field.
func rawFile(n uint64, header string, data []byte) []byte {
	b := binary.LittleEndian.AppendUint64(nil, n)
	b = append(b, header...)
	return append(b, data...)
}

// paddedLen is the header length stFile writes for header.
func paddedLen(header string) int64 {
	return int64((len(header) + 7) / 8 * 8)
}

// writeTemp writes b to a new file in a test directory and returns its path.
func writeTemp(t testing.TB, name string, b []byte) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// walkAll collects every tensor's bytes and sum by name.
func walkAll(t testing.TB, s *Source) (map[string][]byte, map[string][32]byte) {
	t.Helper()
	data := map[string][]byte{}
	sums := map[string][32]byte{}
	err := s.Walk(func(tn *Tensor, raw []byte, sum [32]byte) error {
		data[tn.Name] = append([]byte{}, raw...)
		sums[tn.Name] = sum
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return data, sums
}

// numpyPython is the interpreter of Debian's python3-numpy.
const numpyPython = "/usr/bin/python3"

// runNumpy runs script under /usr/bin/python3 with numpy imported as np,
// feeds it stdin and returns its standard output. It skips when numpy is
// absent, but fails under CI, which must install python3-numpy (.ci/run).
func runNumpy(t *testing.T, script string, stdin []byte) []byte {
	t.Helper()
	requireNumpy(t)
	cmd := exec.Command(numpyPython, "-c", "import sys\nimport numpy as np\n"+script)
	cmd.Stdin = bytes.NewReader(stdin)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("numpy script failed: %v\n%s", err, stderr.String())
	}
	return out
}

// requireNumpy skips when numpy is absent, but fails under CI, which must
// install python3-numpy (.ci/run).
func requireNumpy(t *testing.T) {
	t.Helper()
	if err := exec.Command(numpyPython, "-c", "import numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy not usable through %s (%v): CI must install python3-numpy (.ci/run)", numpyPython, err)
		}
		t.Skipf("numpy not usable through %s (%v); install it to run this check (apt-get install python3-numpy)", numpyPython, err)
	}
}

// f32LE encodes values as little-endian binary32, as safetensors stores F32.
func f32LE(v ...float32) []byte {
	var b []byte
	for _, x := range v {
		b = binary.LittleEndian.AppendUint32(b, math.Float32bits(x))
	}
	return b
}

// f64LE encodes values as little-endian binary64, as safetensors stores F64.
func f64LE(v ...float64) []byte {
	var b []byte
	for _, x := range v {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(x))
	}
	return b
}

// openFailure opens path, requires Open to fail with an *InputError that
// wraps sentinel and names file and tensor at the start of its message, and
// returns that error.
func openFailure(t *testing.T, path string, sentinel error, file, tensor string) *InputError {
	t.Helper()
	s, err := Open(path)
	require.Error(t, err)
	require.Nil(t, s)
	require.ErrorIs(t, err, sentinel)
	var ie *InputError
	require.ErrorAs(t, err, &ie)
	assert.Equal(t, file, ie.File)
	assert.Equal(t, tensor, ie.Tensor)
	assert.True(t, strings.HasPrefix(err.Error(), file+": "), err.Error())
	return ie
}
