package halfmark

import (
	"slices"
	"strconv"
	"strings"
	"time"
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

// EarliestDate is the earliest date any record may carry: no machine in
// use today measured before it, and a year like 0001 or 1900 is a typing or
// parsing error.
var EarliestDate = time.Date(1990, 1, 1, 0, 0, 0, 0, time.UTC)

// checkDate adds a field error when t is missing, before EarliestDate or
// later than now (plus FutureSkew).
func checkDate(f *Fields, field string, t, now time.Time, what string) {
	switch {
	case t.IsZero():
		f.Add(field, "is required (RFC 3339 time, e.g. 2026-03-02T07:45:00+01:00)")
	case t.Before(EarliestDate):
		f.Add(field, "%s is before %d; check the date typed", t.Format(time.RFC3339), EarliestDate.Year())
	case t.After(now.Add(FutureSkew)):
		f.Add(field, "%s is in the future; %s", t.Format(time.RFC3339), what)
	}
}

// Validate checks a service event before it is stored: a machine, a time
// between EarliestDate and now, a note (free text, 1–MaxCommentLength
// characters) and edge names. It normalises the note (trimmed) and edges.
func (ev *ServiceEvent) Validate(now time.Time) error {
	var f Fields
	if ev.MachineID <= 0 {
		f.Add("machine_id", "is required")
	}
	checkDate(&f, "at", ev.At, now, "record a service event once it has happened")
	ev.Note = strings.TrimSpace(ev.Note)
	if ev.Note == "" {
		f.Add("note", "is required (up to %d characters): say what was done, e.g. \"X2 jaw recalibrated\"", MaxCommentLength)
	} else {
		checkText(&f, "note", ev.Note, 1, MaxCommentLength)
	}
	edges := make([]string, 0, len(ev.Edges))
	for i, e := range ev.Edges {
		id, err := ParseEdge(e)
		if err != nil {
			f.Add("edges["+strconv.Itoa(i)+"]", "%s", err.Error())
			continue
		}
		edges = append(edges, id.String())
	}
	ev.Edges = edges
	if c := ev.Component; c != nil {
		switch {
		case !slices.Contains(ComponentKinds, c.Kind):
			f.Add("component.component_kind", "must be one of jaw, mlc_bank, mlc_leaf, penumbra, light_field (got %q)", c.Kind)
		case strings.TrimSpace(c.Name) == "":
			f.Add("component.component", "is required: the jaw (Y2), the bank (bank 2), the leaf (B2P29) or the beam (6 MV FFF)")
		case len(ev.Edges) > 0:
			f.Add("edges", "give either edges or a component, not both")
		}
	}
	return f.Err("the service event is not valid")
}

// ValidateComment checks a free-text comment (acknowledging or resolving an
// alert, signing a report): at most MaxCommentLength characters of text;
// required says whether it may be empty.
func ValidateComment(field, s string, required bool) error {
	min := 0
	if required {
		min = 1
	}
	return CheckText(field, strings.TrimSpace(s), min, MaxCommentLength)
}

// ValidateTokenName checks the name of an API token: one line, 1–100
// characters.
func ValidateTokenName(name string) error {
	var f Fields
	if strings.TrimSpace(name) == "" {
		f.Add("name", "is required (at most 100 characters), e.g. \"console-linac-a\"")
	} else {
		checkLine(&f, "name", name, 1, 100)
	}
	return f.Err("the token is not valid")
}

// ValidateSignOff checks a report sign-off: month "YYYY-MM" from
// EarliestDate to the current month (a report of a month that has not begun
// cannot be signed), and the comment.
func ValidateSignOff(month, comment string, now time.Time) error {
	var f Fields
	m, err := time.Parse("2006-01", month)
	switch {
	case err != nil:
		f.Add("month", "%q is not a month like 2026-03", month)
	case m.Before(EarliestDate):
		f.Add("month", "%s is before %d; check the month", month, EarliestDate.Year())
	case m.After(now.Add(FutureSkew)):
		f.Add("month", "%s has not begun; sign a report once its month has started", month)
	}
	checkText(&f, "comment", strings.TrimSpace(comment), 0, MaxCommentLength)
	return f.Err("the sign-off is not valid")
}

// ValidateFor checks a baseline against the quantity of its series: a
// penumbra baseline lies in 0–MaxPenumbraMM mm, a position or light-field
// offset within ±MaxEdgePositionMM mm (the ranges of checks), σ within the
// same span; valid_from between EarliestDate and now (the store keeps no
// installation date, so EarliestDate stands for the start of the machine's
// life); and the reason.
func (b *Baseline) ValidateFor(q Quantity, now time.Time) error {
	var f Fields
	if b.ValueMM != nil {
		v := *b.ValueMM
		if q == QPenumbra {
			switch {
			case !finite(v):
				f.Add("value_mm", "must be a finite number")
			case v < 0 || v > MaxPenumbraMM:
				f.Add("value_mm", "%v mm is outside 0–%v mm, the range of an 80–20 penumbra; check the units (mm)", v, MaxPenumbraMM)
			}
		} else {
			checkPosition(&f, "value_mm", v)
		}
	}
	if b.SigmaMM != nil {
		limit := 50.0
		if q == QPenumbra {
			limit = MaxPenumbraMM
		}
		if v := *b.SigmaMM; !finite(v) || v <= 0 || v > limit {
			f.Add("sigma_mm", "must be a positive spread in mm up to %v (got %v)", limit, v)
		}
	}
	checkDate(&f, "valid_from", b.ValidFrom, now, "a baseline takes effect at a time that has come")
	checkText(&f, "reason", b.Reason, 1, 2000)
	return f.Err("the baseline is not valid")
}
