package rawdata

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom/pkg/tag"

	"halfmark"
	"halfmark/analysis/epid/synth"
)

// An RT Image rendered from the RT Image module's definitions with known
// jaws (synth.Placement: an analytic model) at collimator 90°, with the
// collimator angle left out of the file: the stored analysis carries the
// warning, and the option collimator_deg names the edges right and is kept
// in the result's geometry_used block for recompute.
func TestImageCollimatorOptionAndProvenance(t *testing.T) {
	g := synth.Default
	p := synth.DefaultPlacement(g)
	p.CollimatorDeg = 90
	p.TranslationMM = [3]float64{20, -15, g.SADmm - g.SIDmm}
	f := synth.Field{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
	data, err := synth.RTImage{Imager: g, Frames: [][]float64{f.PixelsPlaced(g, p)}, Set: p.Tags(),
		Omit: map[tag.Tag]bool{synth.TagBeamLimitingDevAngle: true}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	type stored struct {
		Warnings []string `json:"warnings"`
		Geometry struct {
			AxisSource       string    `json:"axis_source"`
			Translation      []float64 `json:"receptor_translation_mm"`
			Orientation      []float64 `json:"orientation"`
			CollimatorDeg    *float64  `json:"collimator_deg"`
			CollimatorSource string    `json:"collimator_source"`
			Quadrant         int       `json:"names_quadrant_deg"`
			Sides            map[string]string
		} `json:"geometry_used"`
	}
	analysis, _, err := Analyze(halfmark.RawImage, data, nil)
	if err != nil {
		t.Fatal(err)
	}
	var s stored
	if err := json.Unmarshal(analysis, &s); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(strings.Join(s.Warnings, ";"), "collimator angle unknown") || s.Geometry.CollimatorDeg != nil {
		t.Errorf("without the angle: warnings %q, geometry %+v", s.Warnings, s.Geometry)
	}
	analysis, edges, err := Analyze(halfmark.RawImage, data, json.RawMessage(`{"collimator_deg": 90}`))
	if err != nil {
		t.Fatal(err)
	}
	s = stored{}
	if err := json.Unmarshal(analysis, &s); err != nil {
		t.Fatal(err)
	}
	if s.Geometry.CollimatorDeg == nil || *s.Geometry.CollimatorDeg != 90 || s.Geometry.Quadrant != 90 ||
		s.Geometry.AxisSource != "RTImagePosition + XRayImageReceptorTranslation" || len(s.Geometry.Translation) != 3 ||
		len(s.Geometry.Orientation) != 6 {
		t.Errorf("geometry_used %+v", s.Geometry)
	}
	// Edges at the model's jaws (0.1 mm, the target), under their names.
	want := map[string]float64{"X1": 30, "X2": 70, "Y1": 40, "Y2": 60}
	for _, e := range edges {
		if math.Abs(e.PositionMM-want[e.Edge]) > 0.1 {
			t.Errorf("%s = %.3f mm, want %g", e.Edge, e.PositionMM, want[e.Edge])
		}
	}
	if len(edges) != 4 {
		t.Errorf("%d edges", len(edges))
	}
	if _, _, err := Analyze(halfmark.RawImage, data, json.RawMessage(`{"collimator_deg": "ninety"}`)); err == nil {
		t.Error("a non-numeric collimator_deg was accepted")
	}
}
