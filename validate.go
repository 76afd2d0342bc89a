package halfmark

import (
	"unicode"
	"unicode/utf8"
)

// Free-text limits, in characters (runes).
const (
	MaxNameLength    = 200  // names, labels, e-mail addresses, device and operator fields
	MaxCommentLength = 4000 // notes and comments
)

// CheckText returns an EInvalid error naming field when s is not valid
// UTF-8, holds a control character other than tab and newline (a NUL byte
// among them), or has fewer than min or more than max characters; nil when s
// is acceptable. It is the one rule for free text everywhere: checks,
// machines, tokens, users, comments, service events, sign-offs.
func CheckText(field, s string, min, max int) error {
	var f Fields
	checkText(&f, field, s, min, max)
	return f.Err("the " + field + " is not acceptable text")
}

// checkText adds a field error when s is not acceptable free text (see
// CheckText).
func checkText(f *Fields, field, s string, min, max int) {
	if !utf8.ValidString(s) {
		f.Add(field, "is not valid UTF-8 text")
		return
	}
	n := utf8.RuneCountInString(s)
	if n < min {
		f.Add(field, "is required")
		return
	}
	if n > max {
		f.Add(field, "is %d characters long; at most %d are allowed", n, max)
	}
	for _, r := range s {
		if r != '\t' && r != '\n' && unicode.IsControl(r) {
			f.Add(field, "contains a control character (U+%04X); use plain text", r)
			return
		}
	}
}

// checkLine is checkText for one-line values (names, labels): no newline
// either.
func checkLine(f *Fields, field, s string, min, max int) {
	for _, r := range s {
		if r == '\n' {
			f.Add(field, "must be one line; remove the line break")
			return
		}
	}
	checkText(f, field, s, min, max)
}
