package api_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"mime/multipart"
	"strings"
	"testing"

	"halfmark"
	"halfmark/analysis/epid/synth"
)

func rawForm(t *testing.T, check, kind, options, filename string, data []byte) (string, []byte) {
	var b bytes.Buffer
	w := multipart.NewWriter(&b)
	_ = w.WriteField("check", check)
	_ = w.WriteField("kind", kind)
	if options != "" {
		_ = w.WriteField("options", options)
	}
	fw, _ := w.CreateFormFile("file", filename)
	_, _ = fw.Write(data)
	_ = w.Close()
	return w.FormDataContentType(), b.Bytes()
}

// A check stored from a raw profile keeps the file, the options, the
// analysis and its version; the edges are the analysis' 50% points in the
// store's convention. A 20×20 cm field scanned at SSD 90 cm, depth 10 cm
// lies in a plane 100 cm from the source, the isocentre plane (SAD 100 cm),
// so each edge is at 100 mm (erf edges: 50% at the geometric edge,
// derived).
func TestCheckFromRawProfileAndRecompute(t *testing.T) {
	e := newEnv(t)
	var prof strings.Builder
	for x := -150.0; x <= 150; x += 0.5 {
		fmt.Fprintf(&prof, "%g,%g\n", x, 100*(synth.Phi((x+100)/2.5)-synth.Phi((x-99)/2.5)))
	}
	check := fmt.Sprintf(`{"id":"5d0c1a9e-3f7b-4c2a-9e61-0b7d2f4a8c13","machine_id":%d,"beam_id":%d,"kind":"monthly","measured_at":"2026-05-12T18:00:00Z","device":"water tank","setup":{"ssd_cm":90,"depth_cm":10,"field_x_cm":20,"field_y_cm":20}}`, e.mach, e.beam)
	ct, body := rawForm(t, check, "profile", `{"axis":"Y"}`, "../../tank/scan.csv", []byte(prof.String()))
	st, resp := e.post("/api/v1/checks/raw", ct, body)
	if st != 201 {
		t.Fatalf("%d %s", st, resp)
	}
	var out struct {
		ID              string `json:"id"`
		AnalysisVersion string `json:"analysis_version"`
		Edges           []struct {
			Edge string  `json:"edge"`
			Iso  float64 `json:"iso_position_mm"`
		} `json:"edges"`
		Analysis map[string]any `json:"analysis"`
	}
	if err := json.Unmarshal(resp, &out); err != nil {
		t.Fatal(err)
	}
	if len(out.Edges) != 2 || out.Edges[0].Edge != "Y1" || math.Abs(out.Edges[0].Iso-100) > 0.05 || math.Abs(out.Edges[1].Iso-99) > 0.05 {
		t.Fatalf("edges %+v", out.Edges)
	}
	if out.AnalysisVersion == "" || out.Analysis["field_size_mm"] == nil {
		t.Fatalf("analysis not returned: %s", resp)
	}
	// The raw file comes back byte for byte, under its base name only.
	var list struct {
		Raw []halfmark.RawData `json:"raw"`
	}
	e.mustDo("GET", "/api/v1/checks/"+out.ID+"/raw", halfmark.RoleTherapist, "", 200, &list)
	if len(list.Raw) != 1 || list.Raw[0].Filename != "scan.csv" {
		t.Fatalf("raw list %+v", list.Raw)
	}
	st, _, got := e.do("GET", fmt.Sprintf("/api/v1/raw/%d", list.Raw[0].ID), halfmark.RoleTherapist, "")
	if st != 200 || string(got) != prof.String() {
		t.Fatalf("raw download: %d, %d bytes", st, len(got))
	}
	// Replaying the same upload stores nothing new.
	st, _ = e.post("/api/v1/checks/raw", ct, body)
	if st != 200 || e.count("raw_data") != 1 || e.count("checks") != 1 {
		t.Fatalf("replay: %d, %d raw rows, %d checks", st, e.count("raw_data"), e.count("checks"))
	}
	// Recomputing with the same analysis changes nothing.
	var rc map[string]any
	e.mustDo("POST", "/api/v1/checks/"+out.ID+"/recompute", halfmark.RolePhysicist, "", 200, &rc)
	if rc["changed"] != false || e.count("checks") != 1 {
		t.Fatalf("recompute: %v", rc)
	}
	// Edges typed by hand are refused: they come from the file.
	bad := strings.Replace(check, `"device"`, `"edges":[{"edge":"X1","position_mm":1}],"device"`, 1)
	bad = strings.Replace(bad, "5d0c1a9e", "6d0c1a9e", 1)
	ct2, body2 := rawForm(t, bad, "profile", "", "scan.csv", []byte(prof.String()))
	if st, resp := e.post("/api/v1/checks/raw", ct2, body2); st != 422 {
		t.Fatalf("edges with a raw file: %d %s", st, resp)
	}
	// A file that cannot be analysed stores nothing.
	ct3, body3 := rawForm(t, strings.Replace(check, "5d0c1a9e", "7d0c1a9e", 1), "image", "", "x.dcm", []byte("not DICOM"))
	if st, _ := e.post("/api/v1/checks/raw", ct3, body3); st != 422 || e.count("checks") != 1 {
		t.Fatalf("bad image: %d", st)
	}
}
