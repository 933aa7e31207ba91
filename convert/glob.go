package convert

import (
	"fmt"
	"path"
	"unicode/utf8"
)

// MatchGlob reports whether name matches the glob pattern, with the one
// glob syntax ternkit uses for policy rules, budgets and name filters:
// '*' matches any run of characters, '/' included; '?' matches any one
// character; '[...]' matches one character of a class ('[^...]' negated,
// 'a-z' ranges); '\' quotes the next character. Tensor names are not
// paths, so no character is special to '*' or '?'. A malformed pattern is
// an error.
func MatchGlob(pattern, name string) (bool, error) {
	if err := CheckGlob(pattern); err != nil {
		return false, err
	}
	return matchGlob(pattern, name), nil
}

// CheckGlob reports a malformed pattern (an unclosed class, a trailing
// '\').
func CheckGlob(pattern string) error {
	// the class and escape syntax is that of path.Match, which checks the
	// whole pattern
	if _, err := path.Match(pattern, ""); err != nil {
		return fmt.Errorf("glob %q: %w", pattern, err)
	}
	return nil
}

// matchGlob matches a pattern CheckGlob accepts. '*' is handled by
// remembering the last star and retrying one character further on a
// mismatch: time O(len(pattern)·len(name)), no recursion.
func matchGlob(p, s string) bool {
	starP, starS := -1, 0
	i, j := 0, 0
	for j < len(s) {
		if i < len(p) {
			switch p[i] {
			case '*':
				starP, starS = i, j
				i++
				continue
			default:
				if n, m, ok := matchOne(p[i:], s[j:]); ok {
					i += n
					j += m
					continue
				}
			}
		}
		if starP < 0 {
			return false
		}
		// let the last star take one more character
		_, w := utf8.DecodeRuneInString(s[starS:])
		starS += w
		i, j = starP+1, starS
	}
	for i < len(p) && p[i] == '*' {
		i++
	}
	return i == len(p)
}

// matchOne matches one pattern item (not '*') against the first character
// of s and returns the bytes consumed of each.
func matchOne(p, s string) (np, ns int, ok bool) {
	r, ns := utf8.DecodeRuneInString(s)
	switch p[0] {
	case '?':
		return 1, ns, true
	case '\\':
		q, w := utf8.DecodeRuneInString(p[1:])
		return 1 + w, ns, q == r
	case '[':
		i := 1
		negate := i < len(p) && p[i] == '^'
		if negate {
			i++
		}
		in := false
		for first := true; i < len(p) && (first || p[i] != ']'); first = false {
			lo, w := classChar(p[i:])
			i += w
			hi := lo
			if i < len(p) && p[i] == '-' {
				hi, w = classChar(p[i+1:])
				i += 1 + w
			}
			if lo <= r && r <= hi {
				in = true
			}
		}
		return i + 1, ns, in != negate
	}
	q, w := utf8.DecodeRuneInString(p)
	return w, ns, q == r
}

// classChar reads one possibly quoted character of a class.
func classChar(p string) (rune, int) {
	if p[0] == '\\' {
		r, w := utf8.DecodeRuneInString(p[1:])
		return r, 1 + w
	}
	return utf8.DecodeRuneInString(p)
}
