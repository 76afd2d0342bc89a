package web

import (
	"strings"
	"testing"
	"time"

	"halfmark"
)

// The README promises an overdue check is shown beside the level: at
// every level the overdue badge appears with the level's own badge.
func TestOverdueBesideAnyLevel(t *testing.T) {
	for _, l := range []halfmark.Level{halfmark.LevelInControl, halfmark.LevelInspect, halfmark.LevelScheduled, halfmark.LevelImmediate} {
		g := string(glyph(l, true))
		if !strings.Contains(g, "Check overdue") || !strings.Contains(g, `class="level overdue"`) {
			t.Errorf("level %d, overdue: %s", l, g)
		}
		if l > 0 && !strings.Contains(g, l.String()) {
			t.Errorf("level %d overdue hides the level: %s", l, g)
		}
		if strings.Contains(string(glyph(l, false)), "overdue") {
			t.Errorf("level %d not overdue shows overdue", l)
		}
	}
	if got := levelText(halfmark.LevelInspect, true); got != "Level 1 — inspection · check overdue" {
		t.Errorf("levelText = %q", got)
	}
}

// Engine messages print numbers plainly: "|−45.01|" reads "−45.01".
func TestPlainNumbers(t *testing.T) {
	for in, want := range map[string]string{
		"beyond tolerance (|-45.01| > 2.00 mm)": "beyond tolerance (−45.01 > 2.00 mm)",
		"beyond action limit (|3.5| > 3 mm)":    "beyond action limit (3.5 > 3 mm)",
		"x1|x2 stays":                           "x1|x2 stays",
	} {
		if got := plainNumbers(in); got != want {
			t.Errorf("plainNumbers(%q) = %q, want %q", in, got, want)
		}
	}
}

// A finding belongs to every month its fault was present in: opened, or
// begun (onset), before the month's end and not resolved before its start.
func TestActiveDuring(t *testing.T) {
	day := func(m, d int) time.Time { return time.Date(2026, time.Month(m), d, 12, 0, 0, 0, time.UTC) }
	from, to := day(11, 1), day(12, 1)
	onset, seen, fixed, early := day(10, 28), day(12, 2), day(11, 15), day(10, 20)
	cases := []struct {
		f    halfmark.Finding
		want bool
	}{
		{halfmark.Finding{OpenedAt: day(11, 3)}, true},
		{halfmark.Finding{OpenedAt: seen, Onset: &onset}, true}, // seen after the month, present in it
		{halfmark.Finding{OpenedAt: seen}, false},
		{halfmark.Finding{OpenedAt: day(10, 1), ResolvedAt: &fixed}, true},
		{halfmark.Finding{OpenedAt: day(10, 1), ResolvedAt: &early}, false},
	}
	for i, c := range cases {
		if got := activeDuring(c.f, from, to); got != c.want {
			t.Errorf("case %d: activeDuring = %v, want %v", i, got, c.want)
		}
	}
	if activeAt(halfmark.Finding{OpenedAt: day(10, 1), ResolvedAt: &fixed}, to) {
		t.Error("a finding resolved mid-month is active at the month's end")
	}
}
