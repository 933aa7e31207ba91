package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"unicode/utf8"

	"github.com/spf13/cobra"
)

// textOut is where a command writes its human-readable result: stdout, or
// nowhere under --quiet (which prints nothing on success; errors still go
// to stderr, and --json output is printed all the same).
func textOut(cmd *cobra.Command) io.Writer {
	if quiet(cmd) {
		return io.Discard
	}
	return cmd.OutOrStdout()
}

// writeJSON prints v as indented JSON.
func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// cautionKey marks, on the root command of a run, that the caution was
// printed: it is printed once per run.
const cautionKey = "ternkit.cautioned"

// printCaution prints the caution on stderr, once per run and never under
// --quiet.
func printCaution(cmd *cobra.Command) {
	root := cmd.Root()
	if quiet(cmd) || root.Annotations[cautionKey] != "" {
		return
	}
	if root.Annotations == nil {
		root.Annotations = map[string]string{}
	}
	root.Annotations[cautionKey] = "yes"
	fmt.Fprintln(cmd.ErrOrStderr(), caution)
}

// printTable writes rows (the first is the header) in columns two spaces
// apart; columns from firstNumeric on are right-aligned.
func printTable(w io.Writer, rows [][]string, firstNumeric int) {
	if len(rows) == 0 {
		return
	}
	width := make([]int, len(rows[0]))
	for _, r := range rows {
		for i, c := range r {
			width[i] = max(width[i], utf8.RuneCountInString(c))
		}
	}
	for _, r := range rows {
		var b strings.Builder
		for i, c := range r {
			pad := strings.Repeat(" ", width[i]-utf8.RuneCountInString(c))
			switch {
			case i >= firstNumeric:
				b.WriteString(pad + c)
			case i == len(r)-1:
				b.WriteString(c)
			default:
				b.WriteString(c + pad)
			}
			if i < len(r)-1 {
				b.WriteString("  ")
			}
		}
		fmt.Fprintln(w, b.String())
	}
}
