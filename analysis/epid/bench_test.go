package epid

import "testing"

// BenchmarkSinglePass1024x768 is the floor: one plain pass summing the pixels.
func BenchmarkSinglePass1024x768(b *testing.B) {
	im := tenByTen().image()
	b.ReportAllocs()
	var sink float64
	for b.Loop() {
		s := 0.0
		for _, v := range im.Pix {
			s += v
		}
		sink += s
	}
	_ = sink
}

// BenchmarkAnalyzeField1024x768 (target ≤ 50 ms per image).
func BenchmarkAnalyzeField1024x768(b *testing.B) {
	f := fieldSpec{X1: 45, X2: 55, Y1: 60, Y2: 40, Sigma: 1.5, Bg: 800, Amp: 30000, Noise: 300, Seed: 1}
	im := f.image()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := AnalyzeField(im, FieldOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPicket60: five pickets over the 36 exposed pairs of Layout60.
func BenchmarkPicket60(b *testing.B) {
	p := basePicket()
	p.Noise, p.Seed = 200, 1
	im := p.image()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := AnalyzePicketFence(im, basePicketOpts); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDecodeDICOM1024x768: reading a 16-bit RT Image.
func BenchmarkDecodeDICOM1024x768(b *testing.B) {
	raw := newDCM(tenByTen().pixels()).bytes(b)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := DecodeDICOMBytes(raw, DecodeOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}
