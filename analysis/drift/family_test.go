package drift

import (
	"math"
	"testing"
)

// Siegmund's approximation against the two-sided CUSUM run lengths in
// Montgomery, Introduction to Statistical Quality Control, two-sided CUSUM
// ARL table (k = 0.5 — from memory, recomputed): h = 5
// gives 465, h = 4 gives 168 in control. The two-sided ARL is half the
// one-sided one for a symmetric design.
func TestSiegmundMatchesPublishedARL(t *testing.T) {
	for _, c := range []struct{ h, want float64 }{{5, 465}, {4, 168}} {
		got := siegmundARL(0.5, c.h) / 2
		if math.Abs(got-c.want)/c.want > 0.02 {
			t.Errorf("h = %g: Siegmund ARL %.1f, published %.0f", c.h, got, c.want)
		}
	}
}

// Bonferroni widths: one series keeps L = 3; for m series the tail per
// point is 0.00135/m, e.g. m = 100 → Φ⁻¹(1 − 1.35e−5) = 4.20 (standard
// normal table, common practice).
func TestFamilyWidths(t *testing.T) {
	if ShewhartL(1) != 3 || ShewhartL(0) != 3 {
		t.Fatal("a single series must keep the 3σ chart")
	}
	if got := ShewhartL(100); math.Abs(got-4.20) > 0.01 {
		t.Errorf("L for 100 series = %.3f, want 4.20", got)
	}
	h := familyH(0.5, 5, 100)
	if r := siegmundARL(0.5, h) / siegmundARL(0.5, 5); math.Abs(r-100) > 0.5 {
		t.Errorf("widened h %.3f multiplies the ARL by %.2f, want 100", h, r)
	}
	if familyH(0.5, 5, 1) != 5 {
		t.Error("a single series must keep h")
	}
}
