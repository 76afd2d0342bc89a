package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom/pkg/tag"

	"halfmark/analysis/epid"
	"halfmark/analysis/epid/synth"
)

func runPlain(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), append([]string{"halfmark"}, args...), func(string) string { return "" }, strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

// erfProfile writes a profile of a field with error-function edges at ±half
// (mm) blurred by sigma, sampled every step mm.
func erfProfile(t *testing.T, half, sigma, step float64) string {
	var b strings.Builder
	b.WriteString("# synthetic profile\nposition_mm\tsignal\n")
	for x := -2 * half; x <= 2*half+1e-9; x += step {
		s := 100 * (synth.Phi((x+half)/sigma) - synth.Phi((x-half)/sigma))
		fmt.Fprintf(&b, "%.4f\t%.6f\n", x, s)
	}
	p := filepath.Join(t.TempDir(), "profile.tsv")
	if err := os.WriteFile(p, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// The JSON keys scripts rely on, checked against an error-function edge:
// 50% point at the geometric edge, 80–20 = 2·Φ⁻¹(0.8)·σ = 1.6832·σ
// (derived).
func TestAnalyzeProfileJSON(t *testing.T) {
	p := erfProfile(t, 50, 2, 0.5)
	code, out, stderr := runPlain(t, "analyze", "profile", "--json", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r map[string]any
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"field_size_mm", "centre_mm", "left_edge_mm", "right_edge_mm", "left_penumbra_mm",
		"right_penumbra_mm", "flatness_pct", "symmetry_pct", "method"} {
		if _, ok := r[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	num := func(k string) float64 { v, _ := r[k].(float64); return v }
	for _, c := range []struct {
		key  string
		want float64
	}{{"field_size_mm", 100}, {"left_edge_mm", -50}, {"right_edge_mm", 50}, {"centre_mm", 0},
		{"left_penumbra_mm", 1.6832 * 2}, {"right_penumbra_mm", 1.6832 * 2}} {
		if got := num(c.key); math.Abs(got-c.want) > 0.05 {
			t.Errorf("%s = %.4f, analytic %.4f", c.key, got, c.want)
		}
	}
	code, out, _ = runPlain(t, "analyze", "profile", p)
	if code != 0 || !strings.Contains(out, "field size") || !strings.Contains(out, "X1 edge") {
		t.Errorf("plain table: %d\n%s", code, out)
	}
	if code, _, stderr := runPlain(t, "analyze", "profile", "--normalise", "peak", p); code == 0 || !strings.Contains(stderr, "Normalise") {
		t.Errorf("a bad option must fail with a message naming it: %d %s", code, stderr)
	}
}

func writeDICOM(t *testing.T, pix []float64) string {
	b, err := synth.RTImage{Imager: synth.Default, Frames: [][]float64{pix}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "image.dcm")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// A synthetic RT Image at SID 1500 mm with known jaw edges (erf edges,
// σ = 1.5 mm): X1 = 50, X2 = 50, Y1 = 40, Y2 = 60 mm at the isocentre.
func TestAnalyzeImageJSON(t *testing.T) {
	g := synth.Default
	ar, ac := g.Axis()
	p := writeDICOM(t, synth.Field{X1: 50, X2: 50, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 100, Amp: 20000}.Pixels(g, ar, ac))
	code, out, stderr := runPlain(t, "analyze", "image", "--json", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r struct {
		X1, X2, Y1, Y2 *float64
		FieldX         *float64           `json:"field_x_mm"`
		FieldY         *float64           `json:"field_y_mm"`
		Penumbra       map[string]float64 `json:"penumbra_mm"`
	}
	var raw map[string]json.RawMessage
	_ = json.Unmarshal([]byte(out), &raw)
	for _, k := range []string{"x1_mm", "x2_mm", "y1_mm", "y2_mm", "field_x_mm", "field_y_mm", "penumbra_mm"} {
		if _, ok := raw[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	var fr epid.FieldResult
	if err := json.Unmarshal([]byte(out), &fr); err != nil {
		t.Fatal(err)
	}
	_ = r
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"X1", fr.X1MM, 50}, {"X2", fr.X2MM, 50}, {"Y1", fr.Y1MM, 40}, {"Y2", fr.Y2MM, 60}, {"field X", fr.FieldXMM, 100}, {"field Y", fr.FieldYMM, 100},
		{"X1 penumbra", fr.PenumbraMM["X1"], 1.6832 * 1.5}} {
		if math.Abs(c.got-c.want) > 0.1 {
			t.Errorf("%s = %.3f mm, analytic %.3f", c.name, c.got, c.want)
		}
	}
	if code, _, stderr := runPlain(t, "analyze", "image", erfProfile(t, 50, 2, 0.5)); code != 1 || stderr == "" {
		t.Errorf("a CSV given as an image must fail with a message: %d %q", code, stderr)
	}
}

// A picket fence with one leaf pair's bank 2 end injected +0.8 mm at the
// central picket is reported on that leaf, with max |error| ≈ 0.8 mm.
func TestAnalyzePicketJSON(t *testing.T) {
	pk := synth.Picket{LeafWidthsMM: epid.Layout60.WidthsMM, Pickets: []float64{-60, -30, 0, 30, 60}, Width: 3, Sigma: 1,
		YJaw: 95, Bg: 100, Amp: 20000, Err2: map[[2]int]float64{{30, 2}: 0.8}}
	p := writeDICOM(t, pk.Pixels(synth.Default))
	code, out, stderr := runPlain(t, "analyze", "picket", "--json", "--pickets", "-60,-30,0,30,60", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r struct {
		Leaves []struct {
			Bank    int     `json:"bank"`
			Pair    int     `json:"pair"`
			ErrorMM float64 `json:"error_mm"`
		} `json:"leaves"`
		MaxAbsErrorMM *float64 `json:"max_abs_error_mm"`
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	if r.MaxAbsErrorMM == nil || math.Abs(*r.MaxAbsErrorMM-0.8) > 0.15 {
		t.Fatalf("max_abs_error_mm = %v, want ≈ 0.8", r.MaxAbsErrorMM)
	}
	found := false
	for _, l := range r.Leaves {
		if l.Bank == 2 && l.Pair == 30 && math.Abs(l.ErrorMM-0.8) < 0.15 {
			found = true
		}
	}
	if !found || len(r.Leaves) == 0 {
		t.Fatalf("the injected error on bank 2 pair 30 is not in leaves (%d leaves)", len(r.Leaves))
	}
}

// An RT Image of known jaws (synth.Placement, analytic) at collimator 180°
// on an imager shifted by (−20, 15) mm, with the collimator angle left out
// of the file: --collimator-deg 180 names the edges right (at 180° X1 and
// X2, Y1 and Y2 swap image sides: IEC 61217, PS3.3 C.8.8.2), and the table
// shows the geometry used; without it the result warns.
func TestAnalyzeImageCollimatorFlag(t *testing.T) {
	g := synth.Default
	pl := synth.DefaultPlacement(g)
	pl.CollimatorDeg = 180
	pl.TranslationMM = [3]float64{-20, 15, g.SADmm - g.SIDmm}
	f := synth.Field{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
	b, err := synth.RTImage{Imager: g, Frames: [][]float64{f.PixelsPlaced(g, pl)}, Set: pl.Tags(),
		Omit: map[tag.Tag]bool{synth.TagBeamLimitingDevAngle: true}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "c180.dcm")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := runPlain(t, "analyze", "image", "--json", "--collimator-deg", "180", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var fr epid.FieldResult
	if err := json.Unmarshal([]byte(out), &fr); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"X1", fr.X1MM, 30}, {"X2", fr.X2MM, 70}, {"Y1", fr.Y1MM, 40}, {"Y2", fr.Y2MM, 60}} {
		if math.Abs(c.got-c.want) > 0.1 {
			t.Errorf("%s = %.3f mm, model %g", c.name, c.got, c.want)
		}
	}
	if fr.Geometry == nil || fr.Geometry.CollimatorDeg == nil || *fr.Geometry.CollimatorDeg != 180 || fr.Geometry.Sides["X2"] != "left" {
		t.Errorf("geometry_used %+v", fr.Geometry)
	}
	code, out, _ = runPlain(t, "analyze", "image", "--collimator-deg", "180", p)
	for _, s := range []string{"axis", "RTImagePosition + XRayImageReceptorTranslation", "imager translation", "-20, 15, -500 mm", "orientation", "collimator", "180°", "X2 left"} {
		if code != 0 || !strings.Contains(out, s) {
			t.Errorf("table lacks %q:\n%s", s, out)
		}
	}
	code, out, _ = runPlain(t, "analyze", "image", p)
	if code != 0 || !strings.Contains(out, "collimator angle unknown") {
		t.Errorf("without the flag the missing angle must be a warning:\n%s", out)
	}
	if code, _, stderr := runPlain(t, "analyze", "image", "--collimator-deg", "ninety", p); code == 0 || !strings.Contains(stderr, "collimator-deg") {
		t.Errorf("a bad --collimator-deg must fail naming it: %d %s", code, stderr)
	}
}
