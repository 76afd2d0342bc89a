package profile

import (
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// z80 = Φ⁻¹(0.8): the 80% and 20% points of an error-function edge sit
// z80·σ inside and outside the edge (derived: Φ(z80) = 0.8).
var z80 = phiInv(0.8)

func TestErfPenumbraConstant(t *testing.T) {
	// Derived from Φ⁻¹(0.8) = 0.8416: the 80–20 width of an error-function edge is
	// 2·0.8416·σ = 1.6832·σ.
	if got := 2 * z80; !near(got, 1.6832, 1e-4) {
		t.Fatalf("2·Φ⁻¹(0.8) = %.6f, want 1.6832", got)
	}
}

// TestErfEdges checks edges, field size, centre and penumbra against
// error-function fields of known σ (derived: 50% point at the
// geometric edge, 80–20 = 1.6832·σ), at 0.5 mm sampling within 0.05 mm
// (the brief's accuracy target), for symmetric, shifted and asymmetric
// fields.
func TestErfEdges(t *testing.T) {
	fields := []erfField{
		{-50, 50, 2, 2},         // 10 cm field
		{-100, 100, 3, 3},       // 20 cm field
		{-30.3, 72.1, 1.5, 3.5}, // shifted, asymmetric penumbra
		{-20, 25, 2.5, 1.8},     // small, off-centre
		{-150, 140, 4, 3},       // large
	}
	for _, f := range fields {
		for _, in := range []string{InterpLinear, InterpCubic} {
			s := sampleAt(f.at, grid(f.left-40, f.right+40, 0.5), 812.5, 0, nil)
			r, err := Analyze(s, Options{Interpolation: in})
			if err != nil {
				t.Fatalf("%+v %s: %v", f, in, err)
			}
			checkErf(t, f, r, 0.05)
		}
	}
}

func checkErf(t *testing.T, f erfField, r Result, tol float64) {
	t.Helper()
	checks := []struct {
		name      string
		got, want float64
	}{
		{"left edge", r.LeftEdgeMM, f.left},
		{"right edge", r.RightEdgeMM, f.right},
		{"field size", r.FieldSizeMM, f.right - f.left},
		{"centre", r.CentreMM, (f.left + f.right) / 2},
		{"left penumbra", r.LeftPenumbraMM, 2 * z80 * f.sigmaL},
		{"right penumbra", r.RightPenumbraMM, 2 * z80 * f.sigmaR},
		{"left 80%", r.Left80MM, f.left + z80*f.sigmaL},
		{"left 20%", r.Left20MM, f.left - z80*f.sigmaL},
		{"right 80%", r.Right80MM, f.right - z80*f.sigmaR},
		{"right 20%", r.Right20MM, f.right + z80*f.sigmaR},
	}
	for _, c := range checks {
		if !near(c.got, c.want, tol) {
			t.Errorf("%+v (%s): %s = %.4f mm, want %.4f ± %g", f, r.Interpolation, c.name, c.got, c.want, tol)
		}
	}
}

// TestLinearRamp: straight-line edges of width w have their 50% point at the
// centre of the ramp and 80–20 = 0.6·w (derived); linear
// interpolation reproduces them exactly.
func TestLinearRamp(t *testing.T) {
	for _, f := range []rampField{{-50, 50, 6}, {-37.3, 61.9, 4}, {-80, 20, 10}} {
		s := sampleAt(f.at, grid(f.left-30, f.right+30, 0.5), 1, 0, nil)
		r, err := Analyze(s, Options{})
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct {
			name      string
			got, want float64
		}{
			{"left edge", r.LeftEdgeMM, f.left},
			{"right edge", r.RightEdgeMM, f.right},
			{"left penumbra", r.LeftPenumbraMM, 0.6 * f.w},
			{"right penumbra", r.RightPenumbraMM, 0.6 * f.w},
		} {
			if !near(c.got, c.want, 1e-9) {
				t.Errorf("%+v: %s = %.12f, want %.12f", f, c.name, c.got, c.want)
			}
		}
	}
}

// TestUnsortedNonUniform: random spacing 0.2–0.8 mm, shuffled, gives the
// analytic edges (derived) within 0.05 mm, and exactly the result of the
// same samples sorted.
func TestUnsortedNonUniform(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := range 20 {
		f := erfField{-45 + 10*rng.Float64(), 45 + 10*rng.Float64(), 1.5 + 2*rng.Float64(), 1.5 + 2*rng.Float64()}
		sorted := sampleAt(f.at, jittered(f.left-35, f.right+35, 0.2, 0.8, rng), 1, 0, nil)
		shuffled := slices.Clone(sorted)
		rng.Shuffle(len(shuffled), func(i, j int) { shuffled[i], shuffled[j] = shuffled[j], shuffled[i] })
		reversed := slices.Clone(sorted)
		slices.Reverse(reversed)
		want, err := Analyze(sorted, Options{})
		if err != nil {
			t.Fatal(err)
		}
		checkErf(t, f, want, 0.05)
		for _, in := range [][]Sample{shuffled, reversed} {
			got, err := Analyze(in, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if got.LeftEdgeMM != want.LeftEdgeMM || got.RightPenumbraMM != want.RightPenumbraMM || got.SymmetryPct != want.SymmetryPct {
				t.Errorf("trial %d: order changed the result: %+v vs %+v", trial, got, want)
			}
		}
		if shuffled[0] == sorted[0] && shuffled[1] == sorted[1] {
			t.Fatal("shuffle did nothing")
		}
	}
}

// TestInputNotModified: Analyze sorts a copy.
func TestInputNotModified(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	s := sampleAt(f.at, grid(-90, 90, 0.5), 1, 0, nil)
	slices.Reverse(s[:100])
	before := slices.Clone(s)
	if _, err := Analyze(s, Options{}); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(s, before) {
		t.Fatal("Analyze modified its input")
	}
}

// TestNoise adds Gaussian noise (σn = 0.5% of the CAX signal) over 200
// seeds. Propagating the noise through a crossing gives σx ≈ σn/|dD/dx|
// (first-order error propagation, common practice), with dD/dx = φ(z)/σ at
// level Φ(z); the CAX re-normalisation adds the level's own error. Bounds:
// every edge within 5·σx, the mean over seeds within 5·σx/√200 (no bias).
func TestNoise(t *testing.T) {
	const (
		sigma = 2.5   // mm, edge blur
		sn    = 0.005 // noise, fraction of CAX
		seeds = 200
	)
	f := erfField{-50, 50, sigma, sigma}
	xs := grid(-90, 90, 0.5)
	density := func(z float64) float64 { return math.Exp(-z*z/2) / math.Sqrt(2*math.Pi) }
	// One crossing: noise of the two bracketing samples (≤ σn) plus the level
	// error, frac·σn, from normalising to one noisy CAX value.
	sx := func(frac, z float64) float64 {
		return math.Hypot(sn, frac*sn) / (density(z) / sigma)
	}
	sEdge := sx(0.5, 0)
	sPen := math.Sqrt(sx(0.8, z80)*sx(0.8, z80) + sx(0.2, z80)*sx(0.2, z80))
	var sumEdge, sumPen float64
	for seed := range uint64(seeds) {
		rng := rand.New(rand.NewPCG(seed, 99))
		r, err := Analyze(sampleAt(f.at, xs, 1, sn, rng), Options{})
		if err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
		if e := r.LeftEdgeMM - f.left; math.Abs(e) > 5*sEdge {
			t.Errorf("seed %d: left edge off by %.3f mm, bound %.3f", seed, e, 5*sEdge)
		}
		if e := r.RightEdgeMM - f.right; math.Abs(e) > 5*sEdge {
			t.Errorf("seed %d: right edge off by %.3f mm, bound %.3f", seed, e, 5*sEdge)
		}
		if e := r.LeftPenumbraMM - 2*z80*sigma; math.Abs(e) > 5*sPen {
			t.Errorf("seed %d: left penumbra off by %.3f mm, bound %.3f", seed, e, 5*sPen)
		}
		sumEdge += r.LeftEdgeMM - f.left
		sumPen += r.LeftPenumbraMM - 2*z80*sigma
	}
	if m := sumEdge / seeds; math.Abs(m) > 5*sEdge/math.Sqrt(seeds) {
		t.Errorf("mean left-edge error %.4f mm, bound %.4f", m, 5*sEdge/math.Sqrt(seeds))
	}
	// Linear interpolation also biases the penumbra by ≈ h²·z80/(8σ) per point
	// (the interpolation error bound h²·|D''|/8 over the slope, derived).
	bias := 2 * 0.25 * z80 / (8 * sigma)
	if m := sumPen / seeds; math.Abs(m) > 5*sPen/math.Sqrt(seeds)+bias {
		t.Errorf("mean penumbra error %.4f mm, bound %.4f", m, 5*sPen/math.Sqrt(seeds)+bias)
	}
}

// TestRepeatsAveraged: every position measured twice with noise gives the
// same result as the averaged single profile; exact duplicates change
// nothing.
func TestRepeatsAveraged(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	xs := grid(-80, 80, 0.5)
	rng := rand.New(rand.NewPCG(3, 4))
	a := sampleAt(f.at, xs, 100, 0.3, rng)
	b := sampleAt(f.at, xs, 100, 0.3, rng)
	mean := make([]Sample, len(xs))
	for i := range xs {
		mean[i] = Sample{xs[i], (a[i].Signal + b[i].Signal) / 2}
	}
	got, err := Analyze(append(slices.Clone(a), b...), Options{})
	if err != nil {
		t.Fatal(err)
	}
	want, err := Analyze(mean, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !near(got.LeftEdgeMM, want.LeftEdgeMM, 1e-12) || !near(got.RightPenumbraMM, want.RightPenumbraMM, 1e-12) || got.Samples != len(xs) {
		t.Errorf("repeats: %+v, averaged: %+v", got, want)
	}
	dup, err := Analyze(append(slices.Clone(mean), mean...), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if dup.LeftEdgeMM != want.LeftEdgeMM || dup.FlatnessPct != want.FlatnessPct {
		t.Errorf("exact duplicates changed the result")
	}
}

// TestConflictingRepeats: two readings at 12.5 mm that differ by 10% of the
// peak on a profile with 0.3% noise are an error naming the position.
func TestConflictingRepeats(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	rng := rand.New(rand.NewPCG(5, 6))
	s := sampleAt(f.at, grid(-80, 80, 0.5), 100, 0.3, rng)
	s = append(s, Sample{12.5, f.at(12.5)*100 + 10})
	_, err := Analyze(s, Options{})
	if !errors.Is(err, ErrConflictingRepeats) || !strings.Contains(err.Error(), "12.5 mm") {
		t.Fatalf("got %v, want ErrConflictingRepeats naming 12.5 mm", err)
	}
}

// TestCAXNormalisationIterated: on a wedged field D(x) = erfField·(1 + s·x)
// the converged result must be self-consistent on the analytic profile:
// D(left) = D(right) = D(centre)/2 with centre the mean of the edges (the
// definition of 50% of CAX: IEC 60976 — from memory; common practice).
func TestCAXNormalisationIterated(t *testing.T) {
	base := erfField{-40, 60, 2, 2}
	d := func(x float64) float64 { return base.at(x) * (1 + 0.004*x) }
	r, err := Analyze(sampleAt(d, grid(-90, 110, 0.25), 1, 0, nil), Options{Interpolation: InterpCubic})
	if err != nil {
		t.Fatal(err)
	}
	if c := (r.LeftEdgeMM + r.RightEdgeMM) / 2; !near(c, r.CentreMM, 1e-9) {
		t.Errorf("centre %.6f is not the mean of the edges %.6f", r.CentreMM, c)
	}
	half := d(r.CentreMM) / 2
	for _, x := range []float64{r.LeftEdgeMM, r.RightEdgeMM} {
		if v := d(x); !near(v/half, 1, 2e-4) {
			t.Errorf("D(%.4f) = %.6f, want half the CAX value %.6f", x, v, half)
		}
	}
	if !near(r.NormalisationSignal, d(r.CentreMM), 1e-6) {
		t.Errorf("normalisation %.6f, want D(centre) %.6f", r.NormalisationSignal, d(r.CentreMM))
	}
}

// TestNormaliseMax: on a field with 4% horns, "max" puts the edges where the
// analytic profile is half its maximum; the reference crossing is found by
// bisection of the analytic function.
func TestNormaliseMax(t *testing.T) {
	base := erfField{-50, 50, 2, 2}
	d := func(x float64) float64 { return base.at(x) * (1 + 0.04*(x/40)*(x/40)) }
	xs := grid(-90, 90, 0.1)
	r, err := Analyze(sampleAt(d, xs, 1, 0, nil), Options{Normalise: NormaliseMax})
	if err != nil {
		t.Fatal(err)
	}
	peak := 0.0
	for _, x := range xs {
		peak = max(peak, d(x))
	}
	want := bisect(func(x float64) float64 { return d(x) - peak/2 }, 40, 60)
	if !near(r.RightEdgeMM, want, 0.01) || !near(r.LeftEdgeMM, -want, 0.01) {
		t.Errorf("edges %.4f, %.4f, want ±%.4f", r.LeftEdgeMM, r.RightEdgeMM, want)
	}
	if r.Normalisation != NormaliseMax || !strings.Contains(r.Method, "50% of maximum") {
		t.Errorf("normalisation %q, method %q", r.Normalisation, r.Method)
	}
	rc, _ := Analyze(sampleAt(d, xs, 1, 0, nil), Options{})
	if !(rc.FieldSizeMM > r.FieldSizeMM) {
		t.Errorf("50%% of CAX (%.3f) should be wider than 50%% of a horned maximum (%.3f)", rc.FieldSizeMM, r.FieldSizeMM)
	}
}

// bisect finds a root of fn in [a, b] (fn(a), fn(b) of opposite sign).
func bisect(fn func(float64) float64, a, b float64) float64 {
	fa := fn(a)
	for range 200 {
		m := (a + b) / 2
		if fm := fn(m); (fm < 0) == (fa < 0) {
			a, fa = m, fm
		} else {
			b = m
		}
	}
	return (a + b) / 2
}

// TestCubicAtCoarseSampling: at 1 mm sampling both interpolations stay
// within 0.1 mm of the analytic erf edges (derived).
func TestCubicAtCoarseSampling(t *testing.T) {
	f := erfField{-50.3, 49.6, 2, 2}
	for _, in := range []string{InterpLinear, InterpCubic} {
		r, err := Analyze(sampleAt(f.at, grid(-90, 90, 1), 1, 0, nil), Options{Interpolation: in})
		if err != nil {
			t.Fatal(err)
		}
		checkErf(t, f, r, 0.1)
	}
}

// TestSmoothingBias: one smoothing pass on 0.5 mm samples moves the 80%
// and 20% points by at most h²·|D”|/(4·|D'|) = h²·z80/(4σ) (smooth.go,
// derived); 50% points do not move (D” = 0 there).
func TestSmoothingBias(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	r, err := Analyze(sampleAt(f.at, grid(-90, 90, 0.5), 1, 0, nil), Options{SmoothPasses: 1})
	if err != nil {
		t.Fatal(err)
	}
	bound := 0.25*z80/(4*2) + 0.013 // plus the linear-interpolation error, h²·z80/(8σ)
	checkErf(t, f, r, 2*bound)
	if !strings.Contains(r.Method, "smoothing") || r.SmoothPasses != 1 {
		t.Errorf("method %q does not mention smoothing", r.Method)
	}
}

// TestResultJSON: the JSON keys the rest of the service relies on.
func TestResultJSON(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	r, err := Analyze(sampleAt(f.at, grid(-90, 90, 0.5), 1, 0, nil), Options{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"field_size_mm", "centre_mm", "left_edge_mm", "right_edge_mm", "left_penumbra_mm", "right_penumbra_mm", "flatness_pct", "symmetry_pct", "method"} {
		if _, ok := m[k]; !ok {
			t.Errorf("JSON lacks %q: %s", k, b)
		}
	}
	if m["method"] != "50% of CAX, linear interpolation" {
		t.Errorf("method = %v", m["method"])
	}
}

func TestErrors(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	good := sampleAt(f.at, grid(-90, 90, 1), 1, 0, nil)
	with := func(i int, s Sample) []Sample {
		c := slices.Clone(good)
		c[i] = s
		return c
	}
	cases := []struct {
		name    string
		samples []Sample
		opt     Options
		want    error
		mention string
	}{
		{"nine samples", good[:9], Options{}, ErrTooFewSamples, "got 9"},
		{"nine distinct positions", append(slices.Clone(good[80:89]), good[80:89]...), Options{}, ErrTooFewSamples, "9 distinct"},
		{"NaN signal", with(7, Sample{-83, math.NaN()}), Options{}, ErrNotFinite, "sample 7"},
		{"Inf signal", with(7, Sample{-83, math.Inf(1)}), Options{}, ErrNotFinite, "+Inf"},
		{"NaN position", with(3, Sample{math.NaN(), 0}), Options{}, ErrNotFinite, "sample 3"},
		{"Inf position", with(3, Sample{math.Inf(-1), 0}), Options{}, ErrNotFinite, "position"},
		{"all zero", sampleAt(func(float64) float64 { return 0 }, grid(0, 20, 1), 1, 0, nil), Options{}, ErrNoSignal, "largest signal is 0"},
		{"all negative", sampleAt(f.at, grid(-90, 90, 1), -1, 0, nil), Options{}, ErrNoSignal, "polarity"},
		{"cut on the left", sampleAt(f.at, grid(-45, 90, 1), 1, 0, nil), Options{}, ErrNoCrossing, "50% crossing on the left"},
		{"cut on the right", sampleAt(f.at, grid(-90, 48, 1), 1, 0, nil), Options{}, ErrNoCrossing, "50% crossing on the right"},
		{"high background", sampleAt(func(x float64) float64 { return 0.7*f.at(x) + 0.3 }, grid(-90, 90, 1), 1, 0, nil), Options{}, ErrNoCrossing, "20% crossing on the left"},
		{"bad normalise", good, Options{Normalise: "mean"}, ErrOptions, `"mean"`},
		{"bad interpolation", good, Options{Interpolation: "spline"}, ErrOptions, `"spline"`},
		{"bad smoothing", good, Options{SmoothPasses: 9}, ErrOptions, "9"},
	}
	for _, c := range cases {
		_, err := Analyze(c.samples, c.opt)
		if !errors.Is(err, c.want) || !strings.Contains(err.Error(), c.mention) {
			t.Errorf("%s: got %v, want %v mentioning %q", c.name, err, c.want, c.mention)
		}
	}
}

// TestCheckFinite: a ratio that overflowed is refused rather than returned
// (it could not be encoded as JSON).
func TestCheckFinite(t *testing.T) {
	r := Result{FlatnessIECPct: math.Inf(1)}
	if err := r.checkFinite(); !errors.Is(err, ErrNotFinite) {
		t.Fatalf("got %v, want ErrNotFinite", err)
	}
	r = Result{FFF: &FFFResult{Unflatness: math.NaN()}}
	if err := r.checkFinite(); !errors.Is(err, ErrNotFinite) {
		t.Fatalf("FFF: got %v, want ErrNotFinite", err)
	}
	if err := (&Result{}).checkFinite(); err != nil {
		t.Fatal(err)
	}
}
