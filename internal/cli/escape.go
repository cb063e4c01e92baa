package cli

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// escape returns s fit to print in tamp's human output: text a user or a
// device chose (names, remarks, reasons, ids, server messages) can then
// neither start a new line or column nor drive the terminal. It writes a
// backslash as \\, newline, tab and carriage return as \n, \t and \r, any
// other C0 control and DEL as \xHH, C1 controls, the bidirectional controls
// (U+061C, U+200E, U+200F, U+202A-U+202E, U+2066-U+2069) and the line and
// paragraph separators (U+2028, U+2029) as \uHHHH, and each byte of invalid
// UTF-8 as \xHH. Everything else, letters of any script included, is kept,
// so an escaped name reads as typed and can be read back without doubt.
func escape(s string) string {
	if !needsEscape(s) {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && n == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case r == '\\':
			b.WriteString(`\\`)
		case r == '\n':
			b.WriteString(`\n`)
		case r == '\t':
			b.WriteString(`\t`)
		case r == '\r':
			b.WriteString(`\r`)
		case r < 0x20 || r == 0x7f:
			fmt.Fprintf(&b, `\x%02x`, r)
		case escapedRune(r):
			fmt.Fprintf(&b, `\u%04x`, r)
		default:
			b.WriteString(s[i : i+n])
		}
		i += n
	}
	return b.String()
}

func needsEscape(s string) bool {
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && n == 1 || r == '\\' || r < 0x20 || r == 0x7f || escapedRune(r) {
			return true
		}
		i += n
	}
	return false
}

// escapedRune reports whether r is a C1 control, a bidirectional control or
// a line or paragraph separator.
func escapedRune(r rune) bool {
	switch {
	case r >= 0x80 && r <= 0x9f:
		return true
	case r == 0x061c, r == 0x200e, r == 0x200f:
		return true
	case r >= 0x202a && r <= 0x202e, r >= 0x2066 && r <= 0x2069:
		return true
	case r == 0x2028, r == 0x2029:
		return true
	}
	return false
}
