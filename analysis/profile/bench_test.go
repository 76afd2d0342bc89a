package profile

import (
	"math/rand/v2"
	"testing"
)

// profile400 is a 10 cm flattened field, 400 samples at 0.5 mm with 0.3%
// noise.
func profile400() []Sample {
	f := erfField{-50, 50, 2.5, 2.5}
	return sampleAt(f.at, grid(-99.75, 99.75, 0.5), 1000, 3, rand.New(rand.NewPCG(1, 1)))
}

// fff400 is the synthetic FFF profile, 400 samples at 0.5 mm with 0.3% noise.
func fff400() []Sample {
	return sampleAt(testFFF.at, grid(-99.75, 99.75, 0.5), 10, 0.3*1.15, rand.New(rand.NewPCG(1, 1)))
}

var sink float64

func BenchmarkAnalyze400(b *testing.B) {
	s := profile400()
	if len(s) != 400 {
		b.Fatalf("%d samples", len(s))
	}
	b.ReportAllocs()
	for b.Loop() {
		r, err := Analyze(s, Options{})
		if err != nil {
			b.Fatal(err)
		}
		sink += r.FieldSizeMM
	}
}

// BenchmarkSinglePass400 is the yardstick: one pass over the same samples
// that sums the signal and finds its maximum.
func BenchmarkSinglePass400(b *testing.B) {
	s := profile400()
	b.ReportAllocs()
	for b.Loop() {
		sum, peak := 0.0, s[0].Signal
		for _, v := range s {
			sum += v.Signal
			peak = max(peak, v.Signal)
		}
		sink += sum + peak
	}
}

func BenchmarkAnalyzeCubic400(b *testing.B) {
	s := profile400()
	b.ReportAllocs()
	for b.Loop() {
		r, err := Analyze(s, Options{Interpolation: InterpCubic})
		if err != nil {
			b.Fatal(err)
		}
		sink += r.FieldSizeMM
	}
}

func BenchmarkAnalyzeFFF400(b *testing.B) {
	s := fff400()
	if len(s) != 400 {
		b.Fatalf("%d samples", len(s))
	}
	b.ReportAllocs()
	for b.Loop() {
		r, err := Analyze(s, Options{})
		if err != nil || r.FFF == nil {
			b.Fatal(err, r.Method)
		}
		sink += r.FieldSizeMM
	}
}
