package web

import (
	"strings"
	"testing"

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
