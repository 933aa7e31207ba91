package main

import (
	"fmt"
	"io"
	"strings"

	"ternkit/internal/textsafe"
	"ternkit/report"
)

// printCompanions adds the architecture and the companion files to
// inspect's totals.
func printCompanions(w io.Writer, s *report.Summary) {
	if s.ArchitectureSummary != "" {
		fmt.Fprintf(w, "architecture     %s\n", textsafe.Escape(s.ArchitectureSummary))
	}
	if len(s.Companions) == 0 {
		return
	}
	parts := make([]string, len(s.Companions))
	for i, c := range s.Companions {
		parts[i] = fmt.Sprintf("%s (%s)", textsafe.Escape(c.Name), report.FormatBytes(c.Bytes))
	}
	fmt.Fprintf(w, "companions       %s\n", strings.Join(parts, ", "))
}
