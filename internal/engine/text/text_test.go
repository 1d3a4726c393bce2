package text

import (
	"strings"
	"testing"
	"unicode/utf8"
)

func TestTruncate(t *testing.T) {
	cases := []struct {
		in   string
		n    int
		want string
	}{
		{"short", 10, "short"},
		{"exactly10!", 10, "exactly10!"},
		{"a longer message", 10, "a longe..."},
		{strings.Repeat("é", 10), 10, "ééé..."}, // 2 bytes each: cut at a character boundary
		{"abc", 2, ""},
	}
	for _, tc := range cases {
		got := Truncate(tc.in, tc.n)
		if got != tc.want || len(got) > tc.n && len(tc.in) > tc.n || !utf8.ValidString(got) {
			t.Errorf("Truncate(%q, %d) = %q, want %q", tc.in, tc.n, got, tc.want)
		}
	}
}
