package main

import (
	"fmt"
	"io"
	"strconv"
	"strings"

	"ternkit/diff"
	"ternkit/internal/textsafe"
)

// printCompanionChanges lists the companion files added, removed or
// changed, with the JSON keys that changed.
func printCompanionChanges(w io.Writer, r *diff.Report) {
	if len(r.Companions) == 0 {
		return
	}
	fmt.Fprintf(w, "companions (%d):\n", len(r.Companions))
	for _, c := range r.Companions {
		switch c.Change {
		case diff.CompanionAdded:
			fmt.Fprintf(w, "  + %s, %d bytes\n", textsafe.Escape(c.Name), c.BytesB)
		case diff.CompanionRemoved:
			fmt.Fprintf(w, "  - %s, %d bytes\n", textsafe.Escape(c.Name), c.BytesA)
		default:
			line := fmt.Sprintf("  ~ %s, %d -> %d bytes", textsafe.Escape(c.Name), c.BytesA, c.BytesB)
			if len(c.Keys) > 0 {
				keys := make([]string, len(c.Keys))
				for i, k := range c.Keys {
					keys[i] = strconv.Quote(k) // quoted: a key may hold ", " or control characters
				}
				line += "; keys changed: " + strings.Join(keys, ", ")
			}
			fmt.Fprintln(w, line)
		}
	}
}
