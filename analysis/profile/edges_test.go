package profile

import (
	"errors"
	"strings"
	"testing"
)

// TestProfileWithoutTwoEdges: profiles that do not show a field bounded by
// two edges are refused with ErrNoField (or ErrNoCrossing when a side never
// falls), each with a message saying what is wrong. The shapes are analytic
// (erfField, helpers_test.go) with known edges at −50 and +50 mm.
func TestProfileWithoutTwoEdges(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	xs := grid(-90, 90, 1)
	cases := []struct {
		name    string
		samples []Sample
		want    error
		msg     string
	}{
		{"flat", sampleAt(func(float64) float64 { return 1000 }, xs, 1, 0, nil), ErrNoCrossing, "never falls"},
		{"flat with a one-count step", sampleAt(func(x float64) float64 {
			if x > 0 {
				return 1001
			}
			return 1000
		}, xs, 1, 0, nil), ErrNoCrossing, "never falls"},
		{"one edge (half the field scanned)", sampleAt(f.at, grid(-90, 0, 1), 1000, 0, nil), ErrNoCrossing, "right"},
		{"a single-sample spike", sampleAt(func(x float64) float64 {
			if x == 0 {
				return 1000
			}
			return 10
		}, xs, 1, 0, nil), ErrNoField, "spike"},
		{"a one-sample dropout instead of the right edge", sampleAt(func(x float64) float64 {
			if x == 30 {
				return 100
			}
			if x > -50 {
				return 1000
			}
			return 1000 * f.at(x)
		}, xs, 1, 0, nil), ErrNoField, "dip"},
		{"the right edge at the last sample", sampleAt(f.at, append(grid(-90, 48, 1), 70), 1000, 0, nil), ErrNoField, "end of the scan"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Analyze(c.samples, Options{})
			if !errors.Is(err, c.want) || !strings.Contains(err.Error(), c.msg) {
				t.Errorf("got %v, want %v mentioning %q", err, c.want, c.msg)
			}
		})
	}
	// The genuine field, sampled the same way, is measured at its known edges.
	r, err := Analyze(sampleAt(f.at, xs, 1000, 0, nil), Options{})
	if err != nil || !near(r.LeftEdgeMM, -50, 0.05) || !near(r.RightEdgeMM, 50, 0.05) {
		t.Errorf("genuine field: %+v, %v", r, err)
	}
}
