package notify

import (
	"strings"
	"testing"
	"time"

	"halfmark"
)

// Components are named as the design names them (jaw Y2, MLC bank 2, leaf
// B2P29, penumbra of a beam, light field X1).
func TestComponentLabels(t *testing.T) {
	for _, c := range []struct {
		comp halfmark.Component
		want string
	}{
		{halfmark.Component{Kind: halfmark.ComponentJaw, Name: "Y2"}, "jaw Y2"},
		{halfmark.Component{Kind: halfmark.ComponentMLCBank, Name: "bank 2"}, "MLC bank 2"},
		{halfmark.Component{Kind: halfmark.ComponentMLCLeaf, Name: "B2P29"}, "leaf B2P29"},
		{halfmark.Component{Kind: halfmark.ComponentPenumbra, Name: "6 MV FFF"}, "penumbra of 6 MV FFF"},
		{halfmark.Component{Kind: halfmark.ComponentLightField, Name: "X1"}, "light field X1"},
	} {
		if got := c.comp.Label(); got != c.want {
			t.Errorf("%v.Label() = %q, want %q", c.comp, got, c.want)
		}
	}
}

// A crossing date is shown only for status "projected".
func TestCrossingShowsADateOnlyWhenProjected(t *testing.T) {
	d := time.Date(2027, 3, 4, 0, 0, 0, 0, time.UTC)
	for _, status := range []string{halfmark.CrossingAlreadyBeyond, halfmark.CrossingNotSignificant, halfmark.CrossingBeyondHorizon, ""} {
		// Even with a stray date the text gives none.
		got := crossingText(halfmark.FindingCrossing{Status: status, ToleranceDate: &d}, time.UTC)
		if strings.Contains(got, "2027") {
			t.Errorf("status %q shows a date: %q", status, got)
		}
	}
	got := crossingText(halfmark.FindingCrossing{Status: halfmark.CrossingProjected, ToleranceDate: &d, ActionDate: &d}, time.UTC)
	if got != "projected to reach tolerance on 2027-03-04, the action limit on 2027-03-04" {
		t.Errorf("projected crossing = %q", got)
	}
}

// A penumbra change is "wider" or "narrower", an edge "outward" or
// "inward" (positive = outward or wider, the edge convention).
func TestMagnitudeWordsFollowTheEdgeConvention(t *testing.T) {
	f := halfmark.Finding{Component: halfmark.Component{Kind: halfmark.ComponentPenumbra, Name: "6 MV"}, MagnitudeMM: 0.4, MagnitudeCIMM: [2]float64{0.25, 0.55}}
	if got := magnitudeText(f); got != "+0.40 mm wider (95% interval +0.25 to +0.55 mm)" {
		t.Errorf("penumbra magnitude = %q", got)
	}
	f = halfmark.Finding{Component: halfmark.Component{Kind: halfmark.ComponentJaw, Name: "X1"}, MagnitudeMM: -1.2, MagnitudeCIMM: [2]float64{-1.4, -1.0}}
	if got := magnitudeText(f); got != "-1.20 mm inward (95% interval -1.40 to -1.00 mm)" {
		t.Errorf("jaw magnitude = %q", got)
	}
}

// Without a dashboard URL the e-mail says so instead of giving a link.
func TestFindingBodyWithoutDashboardURL(t *testing.T) {
	body := findingBody(storedFinding(9, halfmark.LevelImmediate), Config{})
	if strings.Contains(body, "http") || !strings.Contains(body, "no dashboard URL is configured") {
		t.Errorf("body without a dashboard URL:\n%s", body)
	}
}

func BenchmarkFindingBody(b *testing.B) {
	f := storedFinding(42, halfmark.LevelImmediate)
	cfg := Config{DashboardURL: "https://halfmark.physics.example"}
	b.ReportAllocs()
	for b.Loop() {
		_ = findingBody(f, cfg)
	}
}

func BenchmarkSign1KiB(b *testing.B) {
	body := []byte(strings.Repeat("x", 1024))
	b.ReportAllocs()
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		_ = Sign("secret", body)
	}
}
