package api_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"mime/multipart"
	"net/http"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom/pkg/tag"

	"halfmark"
	"halfmark/analysis/epid/synth"
)

func (e *env) post(path, ctype string, body []byte) (int, []byte) {
	e.t.Helper()
	req, _ := http.NewRequest("POST", e.srv.URL+path, bytes.NewReader(body))
	req.Header.Set("Content-Type", ctype)
	req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleTherapist])
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		e.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, b
}

// Error-function edges at ±50 mm with σ = 2 mm: field size 100 mm and
// 80–20 penumbra 1.6832·σ (derived: 2·Φ⁻¹(0.8) = 1.6832).
func TestAnalyzeProfileEndpoint(t *testing.T) {
	e := newEnv(t)
	var b strings.Builder
	for x := -100.0; x <= 100; x += 0.5 {
		fmt.Fprintf(&b, "%g,%g\n", x, 100*(synth.Phi((x+50)/2)-synth.Phi((x-50)/2)))
	}
	st, body := e.post("/api/v1/analyze/profile?normalise=cax", "text/csv", []byte(b.String()))
	if st != 200 {
		t.Fatalf("%d %s", st, body)
	}
	var r struct {
		FieldSize float64 `json:"field_size_mm"`
		LeftPen   float64 `json:"left_penumbra_mm"`
		Method    string  `json:"method"`
	}
	_ = json.Unmarshal(body, &r)
	if math.Abs(r.FieldSize-100) > 0.05 || math.Abs(r.LeftPen-3.3664) > 0.05 || r.Method == "" {
		t.Fatalf("result %+v", r)
	}
	// Multipart upload gives the same answer.
	var mp bytes.Buffer
	w := multipart.NewWriter(&mp)
	fw, _ := w.CreateFormFile("file", "scan.csv")
	_, _ = fw.Write([]byte(b.String()))
	_ = w.Close()
	st, body2 := e.post("/api/v1/analyze/profile", w.FormDataContentType(), mp.Bytes())
	if st != 200 || !bytes.Equal(body, body2) {
		t.Fatalf("multipart: %d %s", st, body2)
	}
	// A profile that never falls to 50% on one side is refused with a reason.
	var half strings.Builder
	for x := -100.0; x <= 100; x += 0.5 {
		fmt.Fprintf(&half, "%g,%g\n", x, 100*synth.Phi((x+50)/2))
	}
	st, body = e.post("/api/v1/analyze/profile", "text/csv", []byte(half.String()))
	if st != 422 || !bytes.Contains(body, []byte("errors")) {
		t.Fatalf("one-sided profile: %d %s", st, body)
	}
	st, _ = e.post("/api/v1/analyze/profile", "image/png", []byte("x"))
	if st != 415 {
		t.Fatalf("wrong media type: %d", st)
	}
}

func TestAnalyzeImageEndpoint(t *testing.T) {
	e := newEnv(t)
	g := synth.Default
	ar, ac := g.Axis()
	img, err := synth.RTImage{Imager: g, Frames: [][]float64{synth.Field{X1: 45, X2: 55, Y1: 50, Y2: 50, Sigma: 1.2, Bg: 50, Amp: 10000}.Pixels(g, ar, ac)}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	st, body := e.post("/api/v1/analyze/image", "application/dicom", img)
	if st != 200 {
		t.Fatalf("%d %s", st, body)
	}
	var r struct {
		X1 float64 `json:"x1_mm"`
		X2 float64 `json:"x2_mm"`
	}
	_ = json.Unmarshal(body, &r)
	// Synthetic edges at X1 = 45 mm, X2 = 55 mm (analytic, erf edges).
	if math.Abs(r.X1-45) > 0.1 || math.Abs(r.X2-55) > 0.1 {
		t.Fatalf("X1 %.3f X2 %.3f", r.X1, r.X2)
	}
	// Truncated DICOM: a clear 422, never a 500.
	st, body = e.post("/api/v1/analyze/image", "application/dicom", img[:len(img)/3])
	if st != 422 {
		t.Fatalf("truncated DICOM: %d %s", st, body)
	}
	st, body = e.post("/api/v1/analyze/picket?pickets=1,x", "application/dicom", img)
	if st != 422 || !bytes.Contains(body, []byte(`"pickets"`)) {
		t.Fatalf("bad pickets: %d %s", st, body)
	}
}

// An RT Image of a known field (synth.Placement, analytic) taken at
// collimator 270° on an imager shifted by (20, −15) mm, with the collimator
// angle missing from the file: the answer warns and names the edges for 0°;
// collimator_deg=270 names them right, and geometry_used says what was used.
// A geometry that cannot be named (RTImageOrientation turned 45°) is a 422
// naming the attribute.
func TestAnalyzeImageGeometry(t *testing.T) {
	e := newEnv(t)
	g := synth.Default
	p := synth.DefaultPlacement(g)
	p.CollimatorDeg = 270
	p.TranslationMM = [3]float64{20, -15, g.SADmm - g.SIDmm}
	f := synth.Field{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
	img, err := synth.RTImage{Imager: g, Frames: [][]float64{f.PixelsPlaced(g, p)}, Set: p.Tags(),
		Omit: map[tag.Tag]bool{synth.TagBeamLimitingDevAngle: true}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	type result struct {
		X1, X2, Y1, Y2 float64
		Warnings       []string `json:"warnings"`
		Geometry       struct {
			AxisSource    string            `json:"axis_source"`
			CollimatorDeg *float64          `json:"collimator_deg"`
			Sides         map[string]string `json:"sides"`
		} `json:"geometry_used"`
	}
	read := func(body []byte) result {
		var r struct {
			result
			X1 float64 `json:"x1_mm"`
			X2 float64 `json:"x2_mm"`
			Y1 float64 `json:"y1_mm"`
			Y2 float64 `json:"y2_mm"`
		}
		if err := json.Unmarshal(body, &r); err != nil {
			t.Fatal(err)
		}
		r.result.X1, r.result.X2, r.result.Y1, r.result.Y2 = r.X1, r.X2, r.Y1, r.Y2
		return r.result
	}
	st, body := e.post("/api/v1/analyze/image", "application/dicom", img)
	if st != 200 {
		t.Fatalf("%d %s", st, body)
	}
	r := read(body)
	if !strings.Contains(strings.Join(r.Warnings, ";"), "collimator angle unknown") || r.Geometry.CollimatorDeg != nil {
		t.Errorf("missing angle not reported: %s", body)
	}
	st, body = e.post("/api/v1/analyze/image?collimator_deg=270", "application/dicom", img)
	if st != 200 {
		t.Fatalf("%d %s", st, body)
	}
	r = read(body)
	// Known jaws within 0.1 mm; at 270° X2 is at the bottom of the image
	// (IEC 61217 counter-clockwise from the source, PS3.3 C.8.8.2).
	for _, c := range []struct {
		got, want float64
	}{{r.X1, 30}, {r.X2, 70}, {r.Y1, 40}, {r.Y2, 60}} {
		if math.Abs(c.got-c.want) > 0.1 {
			t.Errorf("edge %.3f, want %g: %s", c.got, c.want, body)
		}
	}
	if r.Geometry.CollimatorDeg == nil || *r.Geometry.CollimatorDeg != 270 || r.Geometry.Sides["X2"] != "bottom" ||
		r.Geometry.AxisSource != "RTImagePosition + XRayImageReceptorTranslation" {
		t.Errorf("geometry_used: %s", body)
	}
	st, body = e.post("/api/v1/analyze/image?collimator_deg=abc", "application/dicom", img)
	if st != 422 || !bytes.Contains(body, []byte(`"collimator_deg"`)) {
		t.Errorf("bad collimator_deg: %d %s", st, body)
	}
	set := p.Tags()
	set[synth.TagRTImageOrientation] = []string{"0.7071", "0.7071", "0", "0.7071", "-0.7071", "0"}
	turned, _ := synth.RTImage{Imager: g, Frames: [][]float64{f.PixelsPlaced(g, p)}, Set: set}.Bytes()
	st, body = e.post("/api/v1/analyze/image", "application/dicom", turned)
	if st != 422 || !bytes.Contains(body, []byte("RTImageOrientation")) {
		t.Errorf("turned orientation: %d %s", st, body)
	}
	// A flat image with a one-count step is not a field.
	flat := make([]float64, g.Rows*g.Cols)
	for i := range flat {
		flat[i] = 1000
		if r, c := i/g.Cols, i%g.Cols; r > 360 && r < 410 && c > 480 && c < 530 {
			flat[i] = 1001
		}
	}
	fimg, _ := synth.RTImage{Imager: g, Frames: [][]float64{flat}}.Bytes()
	st, body = e.post("/api/v1/analyze/image", "application/dicom", fimg)
	if st != 422 || !bytes.Contains(body, []byte("signal range")) {
		t.Errorf("flat image with a one-count step: %d %s", st, body)
	}
}
