package drift

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkEvaluate500 is one evaluation of a 500-point daily series with
// an estimated baseline and the default design (trend on the newest 60
// points).
func BenchmarkEvaluate500(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	x, ts := make([]float64, 500), days(500)
	for i := range x {
		x[i] = 50 + 0.0005*float64(i) + 0.1*rng.NormFloat64()
	}
	in := Input{ValuesMM: x, Times: ts, Limits: Limits{ToleranceMM: 2, ActionMM: 3}}
	o := Options{Now: ts[499]}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Evaluate(in, o); err != nil {
			b.Fatal(err)
		}
	}
}
