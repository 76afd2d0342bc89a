package spc

import (
	"math"
	"testing"
)

// Montgomery, Introduction to Statistical Quality Control, Example 9.1
// (data seen in two independent copies; C+ from a secondary copy):
// μ0 = 10, σ = 1, k = 0.5, h = 5. Convention: the CUSUM keeps accumulating
// after a signal (the textbook's). The data have two decimals and K = 0.5,
// so the printed C+ values are exact; the tolerance only absorbs floating
// point error.
func TestCUSUMMontgomery(t *testing.T) {
	wantCPlus := []float64{0, 0, 0, 1.16, 2.82, 2.50, 0.04, 1.00, 0, 0, 0, 0.97, 0.98, 0, 0,
		0, 0.12, 0, 0, 0.34, 0.74, 0, 1.79, 2.79, 2.89, 3.47, 3.35, 4.47, 5.28}
	r, err := CUSUM(montgomeryData, CUSUMOptions{Target: 10, Sigma: 1, K: 0.5, H: 5})
	if err != nil {
		t.Fatal(err)
	}
	for i, w := range wantCPlus {
		near(t, "C+", r.CPlus[i], w, 1e-9)
	}
	if r.FirstSignal != 28 || !r.SignalUp[28] {
		t.Fatalf("first signal sample %d, want 29 (upper)", r.FirstSignal+1)
	}
	if r.NPlus[28] != 7 {
		t.Errorf("N+ at sample 29 = %d, want 7 (shift began after sample 22)", r.NPlus[28])
	}
	if r.CPlus[28-7] != 0 {
		t.Errorf("C+ at sample 22 = %v; the run counted by N+ must start after a zero", r.CPlus[21])
	}
	near(t, "new mean", r.NewMean[28], 11.25, 0.005)
	for i := range 28 {
		if r.Signal(i) || !math.IsNaN(r.NewMean[i]) {
			t.Errorf("sample %d: signal %v new mean %v before sample 29", i+1, r.Signal(i), r.NewMean[i])
		}
	}
	// Textbook convention: sample 30 keeps accumulating, 5.28 + 10.52 − 10.5.
	near(t, "C+ sample 30", r.CPlus[29], 5.30, 1e-9)

	// Halfmark convention: reset after the signal, so sample 30 restarts
	// from zero: max(0, 10.52 − 10.5).
	rr, err := CUSUM(montgomeryData, CUSUMOptions{Target: 10, Sigma: 1, ResetAfterSignal: true})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "reset C+ sample 29", rr.CPlus[28], 5.28, 1e-9)
	near(t, "reset C+ sample 30", rr.CPlus[29], 0.02, 1e-9)
	if rr.NPlus[29] != 1 || rr.Signal(29) {
		t.Errorf("after reset: N+ %d, signal %v", rr.NPlus[29], rr.Signal(29))
	}
}

// Mirror symmetry of the two-sided CUSUM: x' = 2μ0 − x swaps C+ and C−, so
// the lower side signals at sample 29 with N− = 7 and new mean 2μ0 − 11.254.
func TestCUSUMLowerMirror(t *testing.T) {
	mirror := make([]float64, len(montgomeryData))
	for i, v := range montgomeryData {
		mirror[i] = 20 - v
	}
	up, _ := CUSUM(montgomeryData, CUSUMOptions{Target: 10, Sigma: 1})
	down, err := CUSUM(mirror, CUSUMOptions{Target: 10, Sigma: 1})
	if err != nil {
		t.Fatal(err)
	}
	for i := range mirror {
		near(t, "C- mirror", down.CMinus[i], up.CPlus[i], 1e-9)
		near(t, "C+ mirror", down.CPlus[i], up.CMinus[i], 1e-9)
		if down.NMinus[i] != up.NPlus[i] {
			t.Errorf("sample %d: N− %d, mirrored N+ %d", i+1, down.NMinus[i], up.NPlus[i])
		}
	}
	if down.FirstSignal != 28 || !down.SignalDown[28] || down.SignalUp[28] {
		t.Errorf("mirrored first signal %d", down.FirstSignal+1)
	}
	near(t, "mirrored new mean", down.NewMean[28], 20-up.NewMean[28], 1e-9)
}

// H is in sigma and the comparison is strict: with σ = 2, h = 1 the
// decision interval is 2 mm; C+ = 2 exactly does not signal.
func TestCUSUMStrictAndScaled(t *testing.T) {
	// K = 0.5·2 = 1; x = 3 gives C+ = 3 − 1 = 2 = H.
	r, err := CUSUM([]float64{3, 0.5}, CUSUMOptions{Sigma: 2, K: 0.5, H: 1})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "C+", r.CPlus[0], 2, 1e-12)
	near(t, "interval", r.Interval, 2, 1e-12)
	if r.Signal(0) {
		t.Error("C+ equal to H signalled; beyond is strict")
	}
	near(t, "C+ after", r.CPlus[1], 1.5, 1e-12) // 0.5 − 1 + 2
	if r.NPlus[1] != 2 {
		t.Errorf("N+ %d, want 2", r.NPlus[1])
	}
}

func TestCUSUMErrors(t *testing.T) {
	cases := map[string]CUSUMOptions{
		"zero sigma": {Sigma: 0},
		"negative k": {Sigma: 1, K: -0.5},
		"negative h": {Sigma: 1, H: -5},
		"inf target": {Sigma: 1, Target: math.Inf(-1)},
	}
	for name, o := range cases {
		if _, err := CUSUM([]float64{1}, o); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
	if _, err := CUSUM([]float64{math.NaN()}, CUSUMOptions{Sigma: 1}); err == nil {
		t.Error("NaN value: no error")
	}
	r, err := CUSUM(nil, CUSUMOptions{Sigma: 1})
	if err != nil || r.K != 0.5 || r.H != 5 {
		t.Errorf("defaults k=%v h=%v err %v, want 0.5, 5", r.K, r.H, err)
	}
}
