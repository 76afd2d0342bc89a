package penumbra

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

// The 80–20 width of a Gaussian edge is 2·Φ⁻¹(0.8)·σ (physics reference,
// derived); Φ⁻¹ from gonum's normal distribution.
func TestK8020(t *testing.T) {
	want := 2 * distuv.UnitNormal.Quantile(0.8)
	if math.Abs(K8020-want) > 5e-5 {
		t.Fatalf("K8020 = %v, 2·Φ⁻¹(0.8) = %v", K8020, want)
	}
}

// Khan, The Physics of Radiation Therapy, geometric penumbra
// P = S·(SSD + d − SDD)/SDD (from memory); the worked example S = 2 cm,
// SSD 80 cm, SDD 55 cm gives 1.27 cm at d = 10 cm and 0.909 cm at the
// surface (derived, physics reference "What sets the penumbra").
func TestGeometricPenumbraKhan(t *testing.T) {
	for _, c := range []struct{ d, want, tol float64 }{{10, 1.27, 0.005}, {0, 0.909, 0.0005}} {
		if got := GeometricPenumbra(2, 80, c.d, 55); math.Abs(got-c.want) > c.tol {
			t.Errorf("P(d = %v cm) = %.4f cm, want %v", c.d, got, c.want)
		}
	}
	// The magnification of a collimator at the plane itself is 0 and a
	// collimator nearer the patient gives less blur (common practice).
	if m := Magnification(100, 0, 100); m != 0 {
		t.Errorf("M at the collimator plane = %v, want 0", m)
	}
	if Magnification(90, 10, 28) <= Magnification(90, 10, 50) {
		t.Error("the collimator nearer the source must magnify more")
	}
	if !math.IsNaN(Magnification(40, 0, 50)) {
		t.Error("a plane above the collimator must give NaN")
	}
}

func TestCollimatorOf(t *testing.T) {
	g := Geometry{UpperJaws: "X", UpperSCDcm: 30, LowerSCDcm: 40, MLCSCDcm: 50}
	for e, want := range map[string]Collimator{"X1": Upper, "x2": Upper, "Y1": Lower, "Y2": Lower, "B1P23": MLC} {
		if got, err := g.CollimatorOf(e); err != nil || got != want {
			t.Errorf("%s: %v %v, want %v", e, got, err, want)
		}
	}
	if _, err := (Geometry{}).CollimatorOf("X1"); err == nil {
		t.Error("a jaw edge with no upper_jaws must be refused")
	}
}

// Recovery on synthetic beams generated from the stated model with known
// values (an analytic check): σ_s 0.4–0.8 mm, two jaw pairs and an MLC at
// different SCDs, three setups, noise 0.08 mm per value, 60 sessions.
// Targets: |σ̂_s − σ_s| ≤ 0.1 mm and |R̂(d) − R(d)| ≤ 0.15 mm at every
// measured depth; the standard errors must cover the truth about as often
// as they claim (|error| < 2·SE in at least 85% of fits).
func TestFitRecovers(t *testing.T) {
	runs := 60
	if testing.Short() {
		runs = 15
	}
	var worstS, worstR float64
	covered := 0
	for k := 0; k < runs; k++ {
		rng := rand.New(rand.NewPCG(uint64(k), 11))
		b := simBeam{sigma: 0.4 + 0.4*float64(k%5)/4, r0: 1.8 + 0.1*float64(k%3), r1: 0.07, noiseMM: 0.08}
		pts := b.sessions(rng, 60, time.Date(2026, 1, 5, 9, 0, 0, 0, time.UTC), change{})
		m, err := Fit(pts, simGeometry)
		if err != nil {
			t.Fatal(err)
		}
		if m.Form != FormLinear || m.PointsUsed != len(pts) {
			t.Fatalf("form %q, %d points", m.Form, m.PointsUsed)
		}
		es := math.Abs(m.SourceSigmaMM - b.sigma)
		worstS = math.Max(worstS, es)
		if es < 2*m.SourceSigmaSEMM {
			covered++
		}
		for _, s := range simSetups {
			worstR = math.Max(worstR, math.Abs(m.RAt(s.depth)-(b.r0+b.r1*s.depth)))
		}
		if math.Abs(m.RMSResidualMM-0.08) > 0.01 {
			t.Errorf("run %d: RMS residual %.3f mm, want about the 0.08 mm noise", k, m.RMSResidualMM)
		}
	}
	t.Logf("%d fits: worst |σ̂_s − σ_s| = %.3f mm, worst |R̂ − R| = %.3f mm, 2·SE covers σ_s in %d", runs, worstS, worstR, covered)
	if worstS > 0.1 {
		t.Errorf("worst σ_s error %.3f mm > 0.1 mm", worstS)
	}
	if worstR > 0.15 {
		t.Errorf("worst R error %.3f mm > 0.15 mm", worstR)
	}
	if float64(covered) < 0.85*float64(runs) {
		t.Errorf("2·SE covers the true σ_s in %d of %d fits; the standard errors are too small", covered, runs)
	}
}

func TestFitRefusesDataThatCannotSeparate(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	b := simBeam{sigma: 0.6, r0: 2, r1: 0.07, noiseMM: 0.08}
	pts := b.sessions(rng, 10, time.Now(), change{})
	var oneColl, oneSetup []Point
	for _, p := range pts {
		if p.Collimator == Lower {
			oneColl = append(oneColl, p)
		}
		if p.Setup == simSetups[1].name {
			oneSetup = append(oneSetup, p)
		}
	}
	for name, c := range map[string]struct {
		pts  []Point
		want string
	}{
		"one collimator": {oneColl, "lower jaws only"},
		"one setup":      {oneSetup, "one setup only"},
		"nothing":        {nil, "no penumbra points"},
		"few":            {append(append([]Point(nil), pts[0:3]...), pts[6:9]...), "too few"},
	} {
		_, err := Fit(c.pts, simGeometry)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: err %v, want one containing %q", name, err, c.want)
		}
	}
	if _, err := Fit(pts, Geometry{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 37}); err == nil || !strings.Contains(err.Error(), "MLC") {
		t.Errorf("MLC points without an MLC SCD: %v", err)
	}
}

// Two setups at one depth (different SSDs): R is a constant.
func TestFitConstantForm(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	var pts []Point
	for k := 0; k < 40; k++ {
		for _, s := range []simSetup{{"SSD 90 d 10", 90, 10}, {"SSD 110 d 10", 110, 10}} {
			for _, e := range simEdges {
				c, _ := simGeometry.CollimatorOf(e)
				v := quadrature(0.7, 2.6, Magnification(s.ssd, s.depth, simGeometry.SCD(c)))
				pts = append(pts, Point{ValueMM: v + 0.08*rng.NormFloat64(), SSDcm: s.ssd, DepthCm: s.depth, Collimator: c, Edge: e, Setup: s.name})
			}
		}
	}
	m, err := Fit(pts, simGeometry)
	if err != nil {
		t.Fatal(err)
	}
	if m.Form != FormConstant || len(m.R) != 1 {
		t.Fatalf("form %q R %v, want a constant", m.Form, m.R)
	}
	if math.Abs(m.SourceSigmaMM-0.7) > 0.1 || math.Abs(m.R[0]-2.6) > 0.15 {
		t.Errorf("σ_s %.3f (0.7), R %.3f (2.6)", m.SourceSigmaMM, m.R[0])
	}
}

// Prediction at a setup never measured (extended SSD 120 cm, depth 5 cm)
// against the generating model (analytic check): the interval holds the
// true value in at least 90% of fits and is not absurdly wide.
func TestPredictUnmeasuredSetup(t *testing.T) {
	runs := 40
	hits := 0
	for k := 0; k < runs; k++ {
		rng := rand.New(rand.NewPCG(uint64(k), 99))
		b := simBeam{sigma: 0.6, r0: 2, r1: 0.07, noiseMM: 0.08}
		m, err := Fit(b.sessions(rng, 60, time.Now(), change{}), simGeometry)
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range Collimators {
			truth := quadrature(0.6, 2+0.07*5, Magnification(120, 5, simGeometry.SCD(c)))
			p, err := m.Predict(120, 5, c)
			if err != nil {
				t.Fatal(err)
			}
			if w := p.IntervalMM[1] - p.IntervalMM[0]; w > 0.5 || w < 0.2 {
				t.Errorf("interval width %.3f mm; about ±1.96·0.08 mm expected", w)
			}
			if math.Abs(p.PenumbraMM-truth) > 0.1 {
				t.Errorf("%s: predicted %.3f mm, true %.3f mm", c, p.PenumbraMM, truth)
			}
			if truth >= p.IntervalMM[0] && truth <= p.IntervalMM[1] {
				hits++
			}
		}
	}
	if hits < runs*3*9/10 {
		t.Errorf("the interval held the truth in %d of %d predictions", hits, runs*3)
	}
	m, _ := Fit(simBeam{sigma: 0.6, r0: 2, r1: 0.07, noiseMM: 0.08}.sessions(rand.New(rand.NewPCG(5, 5)), 20, time.Now(), change{}), simGeometry)
	for _, bad := range []struct {
		ssd, d float64
		c      Collimator
		want   string
	}{{30, 5, Upper, "ssd_cm"}, {100, -1, Upper, "depth_cm"}, {100, 5, "side", "collimator"}} {
		if _, err := m.Predict(bad.ssd, bad.d, bad.c); err == nil || !strings.Contains(err.Error(), bad.want) {
			t.Errorf("%+v: %v", bad, err)
		}
	}
}
