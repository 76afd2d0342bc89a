package profile

import (
	"math"
	"math/rand/v2"
	"testing"
)

func curveOf(t *testing.T, xs, ys []float64) *curve {
	t.Helper()
	s := make([]Sample, len(xs))
	for i := range xs {
		s[i] = Sample{xs[i], ys[i]}
	}
	c, err := newCurve(s)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// TestSmoothKeepsLines: the kernel leaves any straight line unchanged at any
// spacing (smooth.go, derived).
func TestSmoothKeepsLines(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	xs := jittered(0, 50, 0.1, 2, rng)
	ys := make([]float64, len(xs))
	for i, x := range xs {
		ys[i] = 3 - 0.7*x
	}
	c := curveOf(t, xs, ys)
	c.smooth(MaxSmoothPasses)
	for i, x := range c.x {
		if !near(c.y[i], 3-0.7*x, 1e-12) {
			t.Fatalf("smoothing moved the line at %g: %g", x, c.y[i])
		}
	}
}

// TestSmoothBinomial: on even spacing one pass is the (1, 2, 1)/4 kernel.
func TestSmoothBinomial(t *testing.T) {
	rng := rand.New(rand.NewPCG(2, 2))
	xs := grid(0, 20, 0.5)
	ys := make([]float64, len(xs))
	for i := range ys {
		ys[i] = rng.Float64()
	}
	c := curveOf(t, xs, ys)
	c.smooth(1)
	for i := 1; i+1 < len(ys); i++ {
		if want := (ys[i-1] + 2*ys[i] + ys[i+1]) / 4; !near(c.y[i], want, 1e-12) {
			t.Fatalf("sample %d: %g, want %g", i, c.y[i], want)
		}
	}
	if c.y[0] != ys[0] || c.y[len(ys)-1] != ys[len(ys)-1] {
		t.Fatal("end samples moved")
	}
}

// TestNoiseSigma: the second-difference estimate recovers the σ of white
// noise added to an edged profile. One estimate from 400 samples scatters by
// about 1.17·1.3/√400 ≈ 8% (the MAD's asymptotic sd, 1.17σ/√n, times about
// 1.3 for overlapping differences — common practice), so the mean over 50
// profiles must lie within 5% (≈ 4 sd of the mean, plus the slight upward
// pull of the edges).
func TestNoiseSigma(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	xs := grid(-100, 100, 0.5)
	sum := 0.0
	for seed := range uint64(50) {
		rng := rand.New(rand.NewPCG(seed, 3))
		c, err := newCurve(sampleAt(f.at, xs, 100, 0.7, rng))
		if err != nil {
			t.Fatal(err)
		}
		sum += c.noiseSigma()
	}
	if got := sum / 50; !near(got, 0.7, 0.035) {
		t.Fatalf("mean σ estimate %g, want 0.7 ± 5%%", got)
	}
}

// TestMergeWithinTolerance: positions closer than SamePositionMM are one
// point; their mean position and signal are kept.
func TestMergeWithinTolerance(t *testing.T) {
	xs := grid(0, 10, 1)
	ys := make([]float64, len(xs))
	for i := range ys {
		ys[i] = 1
	}
	xs = append(xs, 5+SamePositionMM/2)
	ys = append(ys, 1.002)
	c := curveOf(t, xs, ys)
	if len(c.x) != 11 {
		t.Fatalf("%d points, want 11", len(c.x))
	}
	if !near(c.x[5], 5+SamePositionMM/4, 1e-12) || !near(c.y[5], 1.001, 1e-12) {
		t.Fatalf("merged point (%g, %g)", c.x[5], c.y[5])
	}
	for i := 1; i < len(c.x); i++ {
		if !(c.x[i] > c.x[i-1]) {
			t.Fatal("positions not strictly increasing")
		}
	}
}

// TestCrossings: linear crossings of a straight segment are exact; the
// monotone cubic never leaves the bracketing samples; both search outward.
func TestCrossings(t *testing.T) {
	xs := []float64{-5, -4, -3, -2, -1, 0, 1, 2, 3, 4, 5}
	ys := []float64{0, 0, 10, 60, 100, 100, 100, 90, 40, 0, 0}
	for _, cubic := range []bool{false, true} {
		c := curveOf(t, xs, ys)
		if cubic {
			c.fitCubic()
		}
		l, ok := c.crossOut(50, 5, -1)
		if !ok || l <= -3 || l >= -2 {
			t.Errorf("cubic %v: left 50%% at %g (%v), want in (−3, −2)", cubic, l, ok)
		}
		r, ok := c.crossOut(50, 5, 1)
		if !ok || r <= 2 || r >= 3 {
			t.Errorf("cubic %v: right 50%% at %g (%v), want in (2, 3)", cubic, r, ok)
		}
		if !cubic && (!near(l, -2.2, 1e-12) || !near(r, 2.8, 1e-12)) {
			t.Errorf("linear crossings %g, %g, want −2.2, 2.8", l, r)
		}
		if cubic && !near(c.at(r), 50, 1e-6) {
			t.Errorf("cubic crossing %g has value %g", r, c.at(r))
		}
		if _, ok := c.crossOut(-1, 5, 1); ok {
			t.Errorf("cubic %v: found a crossing below zero", cubic)
		}
	}
}

// TestAtFromMatchesAt: the hinted lookup agrees with the binary search in
// both sweep directions.
func TestAtFromMatchesAt(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	xs := jittered(0, 30, 0.2, 1.5, rng)
	ys := make([]float64, len(xs))
	for i, x := range xs {
		ys[i] = math.Sin(x)
	}
	c := curveOf(t, xs, ys)
	hint := 0
	for x := -1.0; x < 32; x += 0.13 {
		if a, b := c.atFrom(x, &hint), c.at(x); !near(a, b, 1e-12) {
			t.Fatalf("atFrom(%g) = %g, at = %g", x, a, b)
		}
	}
	for x := 32.0; x > -1; x -= 0.17 {
		if a, b := c.atFrom(x, &hint), c.at(x); !near(a, b, 1e-12) {
			t.Fatalf("atFrom(%g) = %g, at = %g", x, a, b)
		}
	}
}
