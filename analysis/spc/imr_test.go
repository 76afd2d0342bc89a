package spc

import (
	"errors"
	"math"
	"testing"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.7g, want %.7g ± %.2g", what, got, want, tol)
	}
}

func ptr(v float64) *float64 { return &v }

// NIST/SEMATECH e-Handbook of Statistical Methods §6.3.2.2 individuals
// example (secondary copy). Convention: table constants (UCL 55.8041 = x̄ + 3·MR̄/1.128;
// exact d2 would give 55.8024). Published values are rounded to the digits
// shown, so the tolerance is half a unit of the last digit.
func TestIMRNIST(t *testing.T) {
	x := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	r, err := IMR(x, IMROptions{Constants: ConstantsTable})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "centre", r.Centre, 50.81, 0.005)
	near(t, "MRbar", r.MRBar, 1.8778, 0.00005)
	near(t, "UCL", r.UCL, 55.8041, 0.00005)
	near(t, "LCL", r.LCL, 45.8159, 0.00005)
	wantMR := []float64{2.0, 2.3, 1.4, 3.5, 3.4, 1.4, 0.2, 1.2, 1.5}
	for i, w := range wantMR {
		near(t, "MR", r.MR[i+1], w, 1e-9)
	}
	if !math.IsNaN(r.MR[0]) {
		t.Errorf("MR[0] = %v, want NaN", r.MR[0])
	}
	if r.FirstSignal != -1 {
		t.Errorf("first signal %d; NIST reports the process in control", r.FirstSignal)
	}
	for i, s := range r.MRSignal {
		if s {
			t.Errorf("MR signal at %d; NIST reports the process in control", i)
		}
	}
}

// SAS/QC User's Guide, IRCHART "Tires" individuals example (seen). SAS uses exact d2 and
// d3: LCL 23.8571, mean 24.0083, UCL 24.1596, MR̄ 0.056897, MR UCL 0.18585.
// With table constants the limits are 24.1597 / 23.8570 and MR UCL 0.18588
// (computed from the published data). Tolerance: half a unit of the last printed digit.
func TestIMRTires(t *testing.T) {
	x := []float64{24.05, 23.99, 23.95, 23.93, 23.97, 24.02, 24.06, 24.10, 23.98, 24.03,
		23.91, 24.06, 24.06, 23.96, 23.98, 24.06, 24.01, 24.00, 23.93, 23.92,
		24.09, 24.11, 24.05, 23.98, 23.98, 24.06, 24.02, 24.06, 23.97, 23.96}
	exact, err := IMR(x, IMROptions{Constants: ConstantsExact})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "exact mean", exact.Centre, 24.0083, 0.00005)
	near(t, "exact MRbar", exact.MRBar, 0.056897, 0.0000005)
	near(t, "exact UCL", exact.UCL, 24.1596, 0.00005)
	near(t, "exact LCL", exact.LCL, 23.8571, 0.00005)
	near(t, "exact MR UCL", exact.MRUCL, 0.18585, 0.000005)

	table, err := IMR(x, IMROptions{}) // default: table constants
	if err != nil {
		t.Fatal(err)
	}
	near(t, "table UCL", table.UCL, 24.1597, 0.00005)
	near(t, "table LCL", table.LCL, 23.8570, 0.00005)
	near(t, "table MR UCL", table.MRUCL, 0.18588, 0.000005)
	if exact.FirstSignal != -1 || table.FirstSignal != -1 {
		t.Errorf("signals %d %d; the SAS example is in control", exact.FirstSignal, table.FirstSignal)
	}
}

// "Beyond" is strict (a point on a limit is in control, as in the worked
// examples): with known centre 0 and sigma 1
// the limits are exactly ±3, so ±3 is in control and the next float out is
// not.
func TestIMRStrictLimits(t *testing.T) {
	out := math.Nextafter(3, 4)
	x := []float64{3, -3, out, -out, 0}
	r, err := IMR(x, IMROptions{Centre: ptr(0), Sigma: ptr(1)})
	if err != nil {
		t.Fatal(err)
	}
	want := []bool{false, false, true, true, false}
	for i, w := range want {
		if r.Signal[i] != w {
			t.Errorf("point %d (%v): signal %v, want %v", i, x[i], r.Signal[i], w)
		}
	}
	if r.FirstSignal != 2 {
		t.Errorf("first signal %d, want 2", r.FirstSignal)
	}
	// Known sigma: MR chart centre d2·σ, UCL D4·d2·σ (Montgomery §6.4).
	near(t, "MR centre", r.MRCentre, 1.128, 1e-12)
	near(t, "MR UCL", r.MRUCL, 3.267*1.128, 1e-12)
}

func TestIMRErrors(t *testing.T) {
	cases := map[string]struct {
		x []float64
		o IMROptions
	}{
		"empty":       {nil, IMROptions{}},
		"one value":   {[]float64{1}, IMROptions{}},
		"NaN":         {[]float64{1, math.NaN(), 2}, IMROptions{}},
		"zero sigma":  {[]float64{1, 2}, IMROptions{Sigma: ptr(0)}},
		"constants":   {[]float64{1, 2}, IMROptions{Constants: "rounded"}},
		"negative L":  {[]float64{1, 2}, IMROptions{L: -1}},
		"flat values": {[]float64{2, 2, 2}, IMROptions{}},
	}
	for name, c := range cases {
		if _, err := IMR(c.x, c.o); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
	if _, err := IMR([]float64{2, 2, 2}, IMROptions{}); !errors.Is(err, ErrNoSpread) {
		t.Errorf("flat values: error %v, want ErrNoSpread", err)
	}
	if _, err := IMR([]float64{2}, IMROptions{Sigma: ptr(1)}); err != nil {
		t.Errorf("one value with known sigma: %v", err)
	}
}
