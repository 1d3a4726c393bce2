// Package text holds small helpers for the messages plumbline writes into
// status fields, whose lengths the API bounds.
package text

import "unicode/utf8"

// Truncate shortens s to at most n bytes, ending in "...", without splitting
// a character.
func Truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	if n < 3 {
		return s[:0]
	}
	cut := n - 3
	for cut > 0 && !utf8.RuneStart(s[cut]) {
		cut--
	}
	return s[:cut] + "..."
}
