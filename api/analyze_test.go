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
