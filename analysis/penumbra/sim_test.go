package penumbra

import (
	"math/rand/v2"
	"time"
)

// The synthetic beam of these tests: data generated from the package's own
// stated model with known parameters (an analytic check). The geometry and
// parameters are invented for the tests only.
var simGeometry = Geometry{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50}

type simSetup struct {
	name       string
	ssd, depth float64
}

var simSetups = []simSetup{
	{"10×10 cm, SSD 100 d 1.5", 100, 1.5},
	{"20×20 cm, SSD 90 d 10", 90, 10},
	{"10×10 cm, SSD 80 d 20", 80, 20},
}

var simEdges = []string{"X1", "X2", "Y1", "Y2", "B1P30", "B2P30"}

// simBeam holds a beam's true σ_s (mm) and R(d) = r0 + r1·d (mm, mm/cm).
type simBeam struct {
	sigma, r0, r1 float64
	noiseMM       float64
}

// change is what happens after the onset.
type change struct {
	dSigma, dR float64 // σ_s and R change, mm
	setup      string  // a setup that alone reads dSetup more, mm
	dSetup     float64
}

// session returns one session's points (every edge at every setup) with
// independent Gaussian noise of b.noiseMM on each value.
func (b simBeam) session(rng *rand.Rand, at time.Time, c change) []Point {
	var out []Point
	for _, s := range simSetups {
		for _, e := range simEdges {
			coll, err := simGeometry.CollimatorOf(e)
			if err != nil {
				panic(err)
			}
			mag := Magnification(s.ssd, s.depth, simGeometry.SCD(coll))
			v := quadrature(b.sigma+c.dSigma, b.r0+b.r1*s.depth+c.dR, mag)
			if s.name == c.setup {
				v += c.dSetup
			}
			out = append(out, Point{ValueMM: v + b.noiseMM*rng.NormFloat64(), SSDcm: s.ssd, DepthCm: s.depth,
				Collimator: coll, Edge: e, Setup: s.name, Method: "scan", At: at})
		}
	}
	return out
}

func (b simBeam) sessions(rng *rand.Rand, n int, start time.Time, c change) []Point {
	var out []Point
	for k := 0; k < n; k++ {
		out = append(out, b.session(rng, start.AddDate(0, 0, k), c)...)
	}
	return out
}
