package analysis

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

func TestProjectToIsocentre(t *testing.T) {
	cases := []struct {
		name                     string
		x, sad, ssd, depth, want float64
	}{
		// x_iso = x·SAD/(SSD + d) (common practice, physics.md).
		{"110 cm plane", 55, 100, 100, 10, 50},
		{"isocentre plane at depth", 42.5, 100, 90, 10, 42.5},
		{"negative position", -55, 100, 100, 10, -50},
		// physics.md DICOM example: 0.392 mm pixels at SID 1500 mm, SAD
		// 1000 mm → 0.2613 mm at the isocentre.
		{"EPID pixel", 0.392, 100, 150, 0, 0.2613},
	}
	for _, c := range cases {
		got, err := ProjectToIsocentre(c.x, c.sad, c.ssd, c.depth)
		if err != nil || !near(got, c.want, 1e-4) {
			t.Errorf("%s: got %g, %v; want %g", c.name, got, err, c.want)
		}
	}
}

// TestGeometricPenumbra: physics.md computed example (Khan's formula, from
// memory; values derived): S = 2 cm, SSD = 80 cm, SDD = 55 cm → 1.27 cm at
// d = 10 cm and 0.909 cm at the surface.
func TestGeometricPenumbra(t *testing.T) {
	p, err := GeometricPenumbraMM(20, 80, 10, 55)
	if err != nil || !near(p, 12.7, 0.05) || !near(p, 20*35.0/55, 1e-12) {
		t.Errorf("d = 10 cm: %g mm, %v; want 12.7 mm", p, err)
	}
	p, err = GeometricPenumbraMM(20, 80, 0, 55)
	if err != nil || !near(p, 9.09, 0.005) {
		t.Errorf("surface: %g mm, %v; want 9.09 mm", p, err)
	}
	// A collimator nearer the patient (larger SDD) narrows it (common
	// practice).
	far, _ := GeometricPenumbraMM(2, 100, 10, 30)
	nearer, _ := GeometricPenumbraMM(2, 100, 10, 45)
	if !(nearer < far) {
		t.Errorf("SDD 45 cm gives %g mm, SDD 30 cm %g mm; want smaller", nearer, far)
	}
}

func TestPredictPenumbraChange(t *testing.T) {
	g := CollimatorGeometry{SourceSizeMM: 2, JawSDDcm: 40, MLCSDDcm: 50}
	// The same plane (SSD + d = 100 cm) reached two ways: no change.
	c, err := PredictPenumbraChange(g, Setup{100, 0}, Setup{90, 10})
	if err != nil || math.Abs(c.JawChangeMM) > 1e-12 || math.Abs(c.MLCChangeMM) > 1e-12 {
		t.Errorf("same plane: %+v, %v", c, err)
	}
	// 10 cm deeper: P is linear in d, so ΔP = S·Δd/SDD (derived).
	c, err = PredictPenumbraChange(g, Setup{100, 5}, Setup{100, 15})
	if err != nil || !near(c.JawChangeMM, 2*10.0/40, 1e-12) || !near(c.MLCChangeMM, 2*10.0/50, 1e-12) {
		t.Errorf("10 cm deeper: %+v, %v; want jaw +0.5, MLC +0.4 mm", c, err)
	}
	if !near(c.JawBeforeMM, 2*(105.0-40)/40, 1e-12) || !near(c.MLCAfterMM, 2*(115.0-50)/50, 1e-12) {
		t.Errorf("absolute values %+v", c)
	}
}

func TestGeometryErrors(t *testing.T) {
	g := CollimatorGeometry{SourceSizeMM: 2, JawSDDcm: 40, MLCSDDcm: 50}
	cases := []struct {
		name    string
		err     error
		mention string
	}{
		{"zero SAD", second(ProjectToIsocentre(1, 0, 100, 0)), "SAD is 0"},
		{"negative SSD", second(ProjectToIsocentre(1, 100, -100, 0)), "SSD is -100"},
		{"negative depth", second(ProjectToIsocentre(1, 100, 100, -1)), "depth is -1"},
		{"NaN position", second(ProjectToIsocentre(math.NaN(), 100, 100, 0)), "position is NaN"},
		{"zero source", second(GeometricPenumbraMM(0, 100, 10, 40)), "source size is 0"},
		{"Inf SSD", second(GeometricPenumbraMM(2, math.Inf(1), 10, 40)), "SSD is +Inf"},
		{"plane before collimator", second(GeometricPenumbraMM(2, 30, 5, 40)), "must lie beyond the collimator"},
		{"MLC SDD missing", second(PredictPenumbraChange(CollimatorGeometry{SourceSizeMM: 2, JawSDDcm: 40}, Setup{100, 0}, Setup{100, 10})), "MLC, before"},
		{"after set-up bad", second(PredictPenumbraChange(g, Setup{100, 0}, Setup{45, 0})), "MLC, after"},
	}
	for _, c := range cases {
		if !errors.Is(c.err, ErrGeometry) || !strings.Contains(c.err.Error(), c.mention) {
			t.Errorf("%s: got %v, want ErrGeometry mentioning %q", c.name, c.err, c.mention)
		}
	}
}

func second[T any](_ T, err error) error { return err }
