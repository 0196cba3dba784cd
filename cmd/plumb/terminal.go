package main

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// termSafe returns s fit for a terminal: every character a terminal would
// act on rather than show — C0 controls (ESC, CR, BS, BEL, …), DEL, the C1
// controls U+0080–U+009F, the bidirectional overrides — and every byte
// that is not UTF-8 is written as an escape (\x1b, \u009b, \u202e, \xff).
// Names of tables, columns and segments come from the data, so every text
// printer passes them, or its whole text, through here.
func termSafe(s string) string { return escapeControls(s, false) }

// termSafeLines is termSafe for text of several lines: newlines and tabs
// stay as they are.
func termSafeLines(s string) string { return escapeControls(s, true) }

func escapeControls(s string, keepLayout bool) string {
	clean := true
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		if mustEscape(r, n, keepLayout) {
			clean = false
			break
		}
		i += n
	}
	if clean {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && n <= 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case !mustEscape(r, n, keepLayout):
			b.WriteString(s[i : i+n])
		case r < 0x80:
			fmt.Fprintf(&b, `\x%02x`, r)
		default:
			fmt.Fprintf(&b, `\u%04x`, r)
		}
		i += n
	}
	return b.String()
}

func mustEscape(r rune, n int, keepLayout bool) bool {
	switch {
	case r == utf8.RuneError && n <= 1:
		return true
	case r == '\n' || r == '\t':
		return !keepLayout
	case r < 0x20 || r == 0x7f || (r >= 0x80 && r < 0xa0):
		return true
	case r >= 0x202a && r <= 0x202e, r >= 0x2066 && r <= 0x2069, r == 0x200e, r == 0x200f, r == 0x061c:
		return true
	}
	return false
}
