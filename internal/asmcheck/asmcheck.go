// Package asmcheck finds instructions in Go assembly that mix legacy SSE
// encodings with AVX code: a MOVL or MOVQ to or from an X register (VMOVD
// and VMOVQ are the VEX forms). Mixing them costs a state transition, or a
// merge with the upper register halves, at every such instruction on many
// x86 processors: a kernel called once per block of a few hundred weights
// ran several times slower with one legacy MOVQ in its loop.
package asmcheck

import (
	"bufio"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
)

var legacyMove = regexp.MustCompile(`^\s*MOV[LQ]\s+[^;/]*\bX([0-9]|1[0-5])\b`)

// LegacySSEMoves returns "file:line: text" for each such instruction in
// the .s files of dir.
func LegacySSEMoves(dir string) ([]string, error) {
	files, err := filepath.Glob(filepath.Join(dir, "*.s"))
	if err != nil {
		return nil, err
	}
	var found []string
	for _, path := range files {
		f, err := os.Open(path)
		if err != nil {
			return nil, err
		}
		sc := bufio.NewScanner(f)
		for n := 1; sc.Scan(); n++ {
			line := sc.Text()
			// a macro line holds several instructions
			for _, ins := range strings.Split(line, ";") {
				if legacyMove.MatchString(ins) {
					found = append(found, fmt.Sprintf("%s:%d: %s", filepath.Base(path), n, strings.TrimSpace(ins)))
				}
			}
		}
		f.Close()
		if err := sc.Err(); err != nil {
			return nil, err
		}
	}
	return found, nil
}
