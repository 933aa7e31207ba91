// Package textsafe makes strings read from files (tensor names, metadata,
// tool strings) safe to print on a terminal: control characters, which a
// terminal would obey (ESC starts a control sequence, CR moves back over a
// line), are shown as escapes instead.
package textsafe

import (
	"strconv"
	"strings"
	"unicode/utf8"
)

// Escape returns s with every C0 control character (U+0000–U+001F), DEL
// (U+007F), C1 control character (U+0080–U+009F), bidirectional
// formatting character (U+061C, U+200E, U+200F, U+202A–U+202E,
// U+2066–U+2069: they reorder the text shown around them) and byte that is
// not UTF-8 written as a Go escape (\x1b, \r, \u0085, \u202e, \xff); s
// itself when it holds none, so ordinary names print unchanged.
func Escape(s string) string {
	return escape(s, false)
}

// EscapeLines is Escape for a message of several lines: it keeps newlines
// and tabs.
func EscapeLines(s string) string {
	return escape(s, true)
}

func escape(s string, lines bool) string {
	if !needsEscape(s) {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, w := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && w == 1:
			b.WriteString(`\x`)
			b.WriteString(strconv.FormatUint(uint64(s[i])>>4, 16))
			b.WriteString(strconv.FormatUint(uint64(s[i])&15, 16))
		case isControl(r) && !(lines && (r == '\n' || r == '\t')):
			q := strconv.QuoteRune(r) // 'ESC' → '\x1b'
			b.WriteString(q[1 : len(q)-1])
		default:
			b.WriteString(s[i : i+w])
		}
		i += w
	}
	return b.String()
}

func isControl(r rune) bool {
	return r < 0x20 || r == 0x7f || 0x80 <= r && r <= 0x9f || isBidi(r)
}

// isBidi reports the Unicode bidirectional formatting characters (the
// Unicode Standard, UAX #9, "Explicit Directional Embeddings, Overrides
// and Isolates", and the implicit marks ALM, LRM, RLM).
func isBidi(r rune) bool {
	return r == 0x061c || r == 0x200e || r == 0x200f || 0x202a <= r && r <= 0x202e || 0x2066 <= r && r <= 0x2069
}

func needsEscape(s string) bool {
	for i := 0; i < len(s); {
		r, w := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && w == 1 || isControl(r) {
			return true
		}
		i += w
	}
	return false
}
