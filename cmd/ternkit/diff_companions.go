package main

import (
	"fmt"
	"io"
	"strings"

	"ternkit/diff"
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
			fmt.Fprintf(w, "  + %s, %d bytes\n", c.Name, c.BytesB)
		case diff.CompanionRemoved:
			fmt.Fprintf(w, "  - %s, %d bytes\n", c.Name, c.BytesA)
		default:
			line := fmt.Sprintf("  ~ %s, %d -> %d bytes", c.Name, c.BytesA, c.BytesB)
			if len(c.Keys) > 0 {
				line += "; keys changed: " + strings.Join(c.Keys, ", ")
			}
			fmt.Fprintln(w, line)
		}
	}
}
