package epid

import (
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// penumbraErf is the 80–20 width of an error-function edge of width σ:
// 2·Φ⁻¹(0.8)·σ = 1.6832·σ (physics.md, derived). Φ⁻¹ from gonum's normal
// distribution, a general-purpose library.
func penumbraErf(sigma float64) float64 {
	return 2 * distuv.UnitNormal.Quantile(0.8) * sigma
}

func checkField(t *testing.T, r FieldResult, f fieldSpec, tolPos, tolPen float64) {
	t.Helper()
	near(t, "x1_mm", r.X1MM, f.X1, tolPos)
	near(t, "x2_mm", r.X2MM, f.X2, tolPos)
	near(t, "y1_mm", r.Y1MM, f.Y1, tolPos)
	near(t, "y2_mm", r.Y2MM, f.Y2, tolPos)
	near(t, "field_x_mm", r.FieldXMM, f.X1+f.X2, 2*tolPos)
	near(t, "field_y_mm", r.FieldYMM, f.Y1+f.Y2, 2*tolPos)
	near(t, "centre_x_mm", r.CentreXMM, (f.X2-f.X1)/2, tolPos)
	near(t, "centre_y_mm", r.CentreYMM, (f.Y2-f.Y1)/2, tolPos)
	for _, e := range []string{EdgeX1, EdgeX2, EdgeY1, EdgeY2} {
		near(t, "penumbra "+e, r.PenumbraMM[e], penumbraErf(f.Sigma), tolPen)
	}
}

func TestPenumbraConstant(t *testing.T) {
	// physics.md: 80–20 width of an erf edge = 1.6832·σ (derived).
	near(t, "80-20 / sigma", penumbraErf(1), 1.6832, 0.0001)
}

func TestFieldAnalyticEdges(t *testing.T) {
	cases := map[string]fieldSpec{
		// 10 × 10 cm: each edge 5 cm from the axis (physics.md, common practice).
		"10x10":      {X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 800, Amp: 30000},
		"asymmetric": {X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.2, Bg: 800, Amp: 30000},
		// Half-beam block: the X1 edge on the axis.
		"half beam X1=0": {X1: 0, X2: 100, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 800, Amp: 30000},
		"2x2":            {X1: 10, X2: 10, Y1: 10, Y2: 10, Sigma: 1.0, Bg: 200, Amp: 20000},
		"jaw past axis":  {X1: -20, X2: 60, Y1: 30, Y2: 30, Sigma: 1.5, Bg: 800, Amp: 30000},
	}
	for name, f := range cases {
		t.Run(name, func(t *testing.T) {
			r, err := AnalyzeField(f.image(), FieldOptions{})
			if err != nil {
				t.Fatal(err)
			}
			// Linear interpolation between 0.26 mm samples of an erf edge is
			// exact at its inflection (the 50% point) to well under 0.01 mm.
			checkField(t, r, f, 0.02, 0.03)
			near(t, "rotation_deg", r.RotationDeg, 0, 0.02)
			if r.Inverted {
				t.Error("reported inverted")
			}
			if len(r.Warnings) != 0 {
				t.Errorf("unexpected warnings %q", r.Warnings)
			}
		})
	}
}

func TestFieldNoise(t *testing.T) {
	// 1% noise per pixel: positions within 0.1 mm, penumbra within 0.15 mm.
	for seed := uint64(1); seed <= 5; seed++ {
		f := fieldSpec{X1: 45, X2: 55, Y1: 60, Y2: 40, Sigma: 1.5, Bg: 800, Amp: 30000, Noise: 300, Seed: seed}
		r, err := AnalyzeField(f.image(), FieldOptions{})
		if err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
		checkField(t, r, f, 0.1, 0.15)
		near(t, "rotation_deg", r.RotationDeg, 0, 0.1)
	}
}

func TestFieldAbsoluteLevels(t *testing.T) {
	// With levels as fractions of the central value C = Bg + Amp (IEC form),
	// the 50% level Bg + Amp·Φ(z) = C/2 lies at Φ(z) = ½ − Bg/(2·Amp) from
	// the edge, i.e. the field edge appears at z·σ outside the geometric edge
	// (derived from the erf edge of physics.md).
	f := fieldSpec{X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 3000, Amp: 30000}
	r, err := AnalyzeField(f.image(), FieldOptions{AbsoluteLevels: true})
	if err != nil {
		t.Fatal(err)
	}
	shift := -distuv.UnitNormal.Quantile(0.5-f.Bg/(2*f.Amp)) * f.Sigma
	near(t, "x1 with absolute levels", r.X1MM, 50+shift, 0.02)
	near(t, "y2 with absolute levels", r.Y2MM, 50+shift, 0.02)
	if shift < 0.1 {
		t.Fatalf("test would not tell the two normalisations apart (shift %.3f mm)", shift)
	}
}

func TestFieldThroughDICOM(t *testing.T) {
	// Written with the DICOM library, decoded, analysed: the geometry comes
	// only from the RT Image attributes.
	f := fieldSpec{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
	im, err := decode(t, newDCM(f.pixels()).bytes(t), DecodeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	checkField(t, r, f, 0.05, 0.05)
	near(t, "pixel_size_x_mm", r.PixelSizeXMM, 0.2613, 0.00005) // physics.md
}

func TestFieldImagePositionAxis(t *testing.T) {
	// The beam axis at row 400, column 530 (not the image centre): jaw
	// distances are measured from it.
	f := fieldSpec{X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 800, Amp: 30000, AxisRow: 400, AxisCol: 530}
	d := newDCM(f.pixels())
	d.set[tagRTImagePosition] = ds("-207.76", "156.8") // 530·0.392, 400·0.392
	b := d.bytes(t)
	im, err := decode(t, b, DecodeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	checkField(t, r, f, 0.05, 0.05)
	if !strings.HasPrefix(r.AxisSource, "RTImagePosition") {
		t.Errorf("axis_source %q", r.AxisSource)
	}
	// Ignoring the position moves the axis to the image centre, 18.5 columns
	// left of and 16.5 rows above the true axis: the field looks off-centre
	// by exactly that (derived).
	im, _ = decode(t, b, DecodeOptions{IgnoreImagePosition: true})
	r, err = AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "centre_x_mm from image centre", r.CentreXMM, (530-511.5)*testIsoPix, 0.05)
	near(t, "centre_y_mm from image centre", r.CentreYMM, (383.5-400)*testIsoPix, 0.05)
}

func TestFieldInverted(t *testing.T) {
	f := fieldSpec{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
	pix := f.pixels()
	inv := make([]float64, len(pix))
	for i, v := range pix {
		inv[i] = 40000 - v
	}
	t.Run("MONOCHROME1 with inverted values", func(t *testing.T) {
		d := newDCM(inv)
		d.photometric = "MONOCHROME1"
		im, err := decode(t, d.bytes(t), DecodeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if !im.Inverted {
			t.Fatal("MONOCHROME1 not marked inverted")
		}
		r, err := AnalyzeField(im, FieldOptions{})
		if err != nil {
			t.Fatal(err)
		}
		checkField(t, r, f, 0.05, 0.05)
		if !r.Inverted || len(r.Warnings) != 0 {
			t.Errorf("inverted=%v warnings=%q; want inverted, no warning", r.Inverted, r.Warnings)
		}
	})
	t.Run("MONOCHROME2 with inverted values", func(t *testing.T) {
		im, err := decode(t, newDCM(inv).bytes(t), DecodeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		r, err := AnalyzeField(im, FieldOptions{})
		if err != nil {
			t.Fatal(err)
		}
		checkField(t, r, f, 0.05, 0.05)
		if !r.Inverted || !strings.Contains(strings.Join(r.Warnings, ";"), "darker") {
			t.Errorf("inverted=%v warnings=%q; want inverted with a warning", r.Inverted, r.Warnings)
		}
	})
	t.Run("MONOCHROME1 with dose-rising values", func(t *testing.T) {
		d := newDCM(pix)
		d.photometric = "MONOCHROME1"
		im, err := decode(t, d.bytes(t), DecodeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		r, err := AnalyzeField(im, FieldOptions{})
		if err != nil {
			t.Fatal(err)
		}
		checkField(t, r, f, 0.05, 0.05)
		if r.Inverted || !strings.Contains(strings.Join(r.Warnings, ";"), "MONOCHROME1") {
			t.Errorf("inverted=%v warnings=%q; want not inverted with a warning", r.Inverted, r.Warnings)
		}
	})
	t.Run("small off-centre field", func(t *testing.T) {
		// The centre box is background here, so the histogram rule decides.
		g := fieldSpec{X1: -60, X2: 90, Y1: -40, Y2: 70, Sigma: 1.5, Bg: 800, Amp: 30000}
		im := g.image()
		for i, v := range im.Pix {
			im.Pix[i] = 40000 - v
		}
		r, err := AnalyzeField(im, FieldOptions{})
		if err != nil {
			t.Fatal(err)
		}
		checkField(t, r, g, 0.05, 0.05)
		if !r.Inverted {
			t.Error("not detected as inverted")
		}
	})
}

func TestFieldRotated(t *testing.T) {
	for _, deg := range []float64{5, -5, 2} {
		f := fieldSpec{X1: 50, X2: 50, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000, RotDeg: deg, Noise: 150, Seed: 7}
		r, err := AnalyzeField(f.image(), FieldOptions{})
		if err != nil {
			t.Fatal(err)
		}
		// The synthetic field is turned exactly deg about the axis, and its
		// jaw distances are perpendicular distances (testutil_test.go).
		near(t, "rotation_deg", r.RotationDeg, deg, 0.1)
		for e, a := range r.EdgeAngleDeg {
			near(t, "edge angle "+e, a, deg, 0.2)
		}
		checkField(t, r, f, 0.1, 0.15)
		if !strings.Contains(strings.Join(r.Warnings, ";"), "rotated") {
			t.Errorf("%g°: no rotation warning in %q", deg, r.Warnings)
		}
	}
}

func TestFieldCollimatorTagWarning(t *testing.T) {
	im := tenByTen().image()
	c := 5.0
	im.CollimatorDeg = &c
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(strings.Join(r.Warnings, ";"), "collimator angle is 5.0°") {
		t.Errorf("warnings %q do not report the collimator angle", r.Warnings)
	}
}

func TestFieldNoField(t *testing.T) {
	flat := fieldSpec{X1: -200, X2: -190, Y1: 10, Y2: 10, Sigma: 1, Bg: 1000, Amp: 0, Noise: 10, Seed: 3}
	if _, err := AnalyzeField(flat.image(), FieldOptions{}); !errors.Is(err, ErrNoField) {
		t.Errorf("flat noisy image: %v, want ErrNoField", err)
	}
	// 25 cm in Y does not fit the 20 cm the imager sees at the isocentre.
	big := fieldSpec{X1: 50, X2: 50, Y1: 125, Y2: 125, Sigma: 1.5, Bg: 800, Amp: 30000}
	_, err := AnalyzeField(big.image(), FieldOptions{})
	if !errors.Is(err, ErrNoField) || !strings.Contains(err.Error(), "beyond the imager") {
		t.Errorf("field larger than the imager: %v", err)
	}
}

func TestFieldInvalidInput(t *testing.T) {
	im := tenByTen().image()
	im.Pix[5] = math.NaN()
	if _, err := AnalyzeField(im, FieldOptions{}); !errors.Is(err, ErrInvalidImage) || !strings.Contains(err.Error(), "row 0, column 5") {
		t.Errorf("NaN pixel: %v", err)
	}
	if _, err := AnalyzeField(tenByTen().image(), FieldOptions{BandMM: -1}); !errors.Is(err, ErrInvalidOption) {
		t.Errorf("negative band: %v", err)
	}
	bad := tenByTen().image()
	bad.SIDmm = 0
	if _, err := AnalyzeField(bad, FieldOptions{}); !errors.Is(err, ErrInvalidImage) {
		t.Errorf("SAD without SID: %v", err)
	}
}

func TestFromArray(t *testing.T) {
	// An array already at the isocentre: 1 mm pixels, a 40 × 30 mm field.
	const n = 120
	a := make([][]float64, n)
	for r := range a {
		a[r] = make([]float64, n)
		y := float64(n-1)/2 - float64(r)
		for c := range a[r] {
			x := float64(c) - float64(n-1)/2
			a[r][c] = 10 + 100*(phi((x+20)/2)-phi((x-20)/2))*(phi((y+15)/2)-phi((y-15)/2))
		}
	}
	im, err := FromArray(a, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "field_x_mm", r.FieldXMM, 40, 0.05)
	near(t, "field_y_mm", r.FieldYMM, 30, 0.05)
	// Linear interpolation between samples h apart misplaces a crossing of an
	// erf edge by at most h²/8·|f''/f'| = h²/8·z/σ (Taylor bound, derived),
	// z = 0.8416 at the 80% and 20% points: two crossings, h = 1, σ = 2.
	near(t, "penumbra X1", r.PenumbraMM[EdgeX1], penumbraErf(2), 2*0.8416/(8*2)+0.005)
	a[3] = a[3][:5]
	if _, err := FromArray(a, 1, 1); !errors.Is(err, ErrInvalidImage) {
		t.Errorf("ragged array: %v", err)
	}
}

func TestFieldJSONKeys(t *testing.T) {
	r, err := AnalyzeField(tenByTen().image(), FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(r)
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"x1_mm", "x2_mm", "y1_mm", "y2_mm", "field_x_mm", "field_y_mm", "penumbra_mm", "rotation_deg", "inverted", "warnings"} {
		if _, ok := m[k]; !ok {
			t.Errorf("JSON lacks %q: %s", k, b)
		}
	}
	pen, _ := m["penumbra_mm"].(map[string]any)
	for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
		if _, ok := pen[e]; !ok {
			t.Errorf("penumbra_mm lacks %q", e)
		}
	}
}

func TestFieldFlatImageRefused(t *testing.T) {
	// A flat image with a one-count step (a 12.8 mm block one count above
	// 1000, no noise) has contrast 0.1% of its signal range: not a field.
	// The step is analytic (known values), the 5% floor is MinContrastFraction.
	for _, base := range []float64{1000, 40000} {
		f := fieldSpec{X1: 6.4, X2: 6.4, Y1: 6.4, Y2: 6.4, Sigma: 0.01, Bg: base, Amp: 1}
		im := f.image()
		for i, v := range im.Pix {
			im.Pix[i] = math.Round(v)
		}
		_, err := AnalyzeField(im, FieldOptions{})
		if !errors.Is(err, ErrNoField) || !strings.Contains(err.Error(), "signal range") {
			t.Errorf("flat %g with a one-count step: %v, want ErrNoField about the signal range", base, err)
		}
		// The same through DICOM, stored as MONOCHROME1: still refused.
		d := newDCM(im.Pix)
		d.photometric = "MONOCHROME1"
		dim, err := decode(t, d.bytes(t), DecodeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := AnalyzeField(dim, FieldOptions{}); !errors.Is(err, ErrNoField) {
			t.Errorf("flat %g MONOCHROME1: %v, want ErrNoField", base, err)
		}
	}
	// A perfectly flat image: refused too.
	flat := tenByTen().image()
	for i := range flat.Pix {
		flat.Pix[i] = 1000
	}
	if _, err := AnalyzeField(flat, FieldOptions{}); !errors.Is(err, ErrNoField) {
		t.Errorf("flat image: %v, want ErrNoField", err)
	}
	// A real field with a 5% transmission floor is kept (contrast 95%).
	if _, err := AnalyzeField(fieldSpec{X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 1500, Amp: 28500}.image(), FieldOptions{}); err != nil {
		t.Errorf("real field: %v", err)
	}
}
