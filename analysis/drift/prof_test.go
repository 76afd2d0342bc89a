package drift

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkEvaluateMachine is one evaluation of a demo-sized machine with
// two years of data (the model of the demo stories).
func BenchmarkEvaluateMachine(b *testing.B) {
	m := demoModel("Tern", 1, []string{"6 MV", "6 MV FFF", "10 MV"})
	ss := m.series()
	m.fill(ss, rand.New(rand.NewPCG(1, 2)))
	now := newestTime(ss)
	d := DefaultDetection()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := EvaluateMachine(ss, testBook{}, d, now); err != nil {
			b.Fatal(err)
		}
	}
}
