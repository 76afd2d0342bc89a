package profile

import (
	"math"
	"strings"
	"testing"
)

// TestFlattenedMargin: IEC 60976 flattened-region margins (IEC 60976,
// Medical electrical equipment — Medical electron accelerators —
// Functional performance characteristics — from memory): 5–10 cm → 1 cm; 10–30 cm → 0.1·F; > 30 cm → 3 cm; diagonals
// doubled; below 5 cm undefined (central 80% used).
func TestFlattenedMargin(t *testing.T) {
	cases := []struct {
		field    float64
		diagonal bool
		want     float64
		defined  bool
	}{
		{40, false, 4, false},
		{50, false, 10, true},
		{80, false, 10, true},
		{100, false, 10, true},
		{200, false, 20, true},
		{300, false, 30, true},
		{400, false, 30, true},
		{200, true, 40, true},
		{80, true, 20, true},
	}
	for _, c := range cases {
		got, defined := FlattenedMarginMM(c.field, c.diagonal)
		if !near(got, c.want, 1e-12) || defined != c.defined {
			t.Errorf("FlattenedMarginMM(%g, %v) = %g, %v; want %g, %v", c.field, c.diagonal, got, defined, c.want, c.defined)
		}
	}
}

// TestFlatnessSymmetryTilted: a field tilted by a straight line inside the
// flattened region has its extremes at the region ends, so each form follows
// from the analytic profile at those ends (definitions: IEC 60976
// from memory, and common practice); the area form is −50·a·h/(1 + a·δ) for
// D = 1 + a·(x − x0), δ = centre − x0 (derived by integrating the line).
func TestFlatnessSymmetryTilted(t *testing.T) {
	const a = 0.0005 // per mm
	base := erfField{-50, 50, 2, 2}
	d := func(x float64) float64 { return base.at(x) * (1 + a*x) }
	for _, in := range []string{InterpLinear, InterpCubic} {
		r, err := Analyze(sampleAt(d, grid(-90, 90, 0.5), 1, 0, nil), Options{Interpolation: in})
		if err != nil {
			t.Fatal(err)
		}
		margin, _ := FlattenedMarginMM(r.FieldSizeMM, false)
		h := r.FieldSizeMM/2 - margin
		lo, hi := r.CentreMM-h, r.CentreMM+h
		if !near(r.FlattenedRegionMM[0], lo, 1e-9) || !near(r.FlattenedRegionMM[1], hi, 1e-9) {
			t.Fatalf("region %v, want [%g, %g]", r.FlattenedRegionMM, lo, hi)
		}
		dMin, dMax, d0 := d(lo), d(hi), d(r.CentreMM)
		checks := []struct {
			name      string
			got, want float64
		}{
			{"flatness", r.FlatnessPct, 100 * (dMax - dMin) / (dMax + dMin)},
			{"flatness IEC", r.FlatnessIECPct, 100 * dMax / dMin},
			{"symmetry", r.SymmetryPct, 100 * (dMax - dMin) / d0},
			{"symmetry IEC", r.SymmetryIECPct, 100 * dMax / dMin},
			{"symmetry area", r.SymmetryAreaPct, -50 * a * h / (1 + a*r.CentreMM)},
		}
		for _, c := range checks {
			if !near(c.got, c.want, 1e-4) {
				t.Errorf("%s: %s = %.6f, want %.6f", in, c.name, c.got, c.want)
			}
		}
	}
}

// TestFlatnessSymmetricHorns: a symmetric profile D = 1 + b·x² has zero
// point and area symmetry, IEC symmetry 100%, and flatness from its centre
// (minimum) and region ends (maximum) (derived).
func TestFlatnessSymmetricHorns(t *testing.T) {
	const b = 2e-5 // per mm²
	base := erfField{-100, 100, 3, 3}
	d := func(x float64) float64 { return base.at(x) * (1 + b*x*x) }
	r, err := Analyze(sampleAt(d, grid(-140, 140, 0.5), 1, 0, nil), Options{Interpolation: InterpCubic})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(r.SymmetryPct) > 1e-9 || math.Abs(r.SymmetryAreaPct) > 1e-9 || !near(r.SymmetryIECPct, 100, 1e-9) {
		t.Errorf("symmetric profile: symmetry %g, area %g, IEC %g", r.SymmetryPct, r.SymmetryAreaPct, r.SymmetryIECPct)
	}
	h := r.FlattenedRegionMM[1] - r.CentreMM
	dMax, dMin := d(h), d(0)
	if want := 100 * (dMax - dMin) / (dMax + dMin); !near(r.FlatnessPct, want, 1e-4) {
		t.Errorf("flatness %.6f, want %.6f", r.FlatnessPct, want)
	}
	if want := 100 * dMax / dMin; !near(r.FlatnessIECPct, want, 1e-4) {
		t.Errorf("IEC flatness %.6f, want %.6f", r.FlatnessIECPct, want)
	}
}

// TestFlatnessRegionOptions: diagonal profiles double the margin; fields
// under 50 mm use the central 80% and say so.
func TestFlatnessRegionOptions(t *testing.T) {
	f := erfField{-100, 100, 3, 3}
	r, err := Analyze(sampleAt(f.at, grid(-140, 140, 0.5), 1, 0, nil), Options{Diagonal: true})
	if err != nil {
		t.Fatal(err)
	}
	if !near(r.FlattenedRegionMM[1]-r.FlattenedRegionMM[0], 200-2*40, 0.01) {
		t.Errorf("diagonal region %v, want 120 mm wide", r.FlattenedRegionMM)
	}
	small := erfField{-20, 20, 1.5, 1.5}
	r, err = Analyze(sampleAt(small.at, grid(-50, 50, 0.5), 1, 0, nil), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !near(r.FlattenedRegionMM[1]-r.FlattenedRegionMM[0], 32, 0.01) || !strings.Contains(strings.Join(r.Warnings, " "), "below 50 mm") {
		t.Errorf("small field region %v, warnings %q", r.FlattenedRegionMM, r.Warnings)
	}
}
