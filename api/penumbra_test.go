package api_test

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/penumbra"
)

// problemFields reads the field names of a problem body.
func problemFields(t *testing.T, b []byte) []string {
	t.Helper()
	var p struct {
		Errors []struct{ Field string } `json:"errors"`
	}
	if err := json.Unmarshal(b, &p); err != nil {
		t.Fatalf("%v: %s", err, b)
	}
	var out []string
	for _, e := range p.Errors {
		out = append(out, e.Field)
	}
	return out
}

func hasField(t *testing.T, b []byte, field string) bool {
	for _, f := range problemFields(t, b) {
		if f == field {
			return true
		}
	}
	return false
}

// Collimator geometry: set on create, changed by PATCH (admin only,
// audited), refused with a 422 naming the field and nothing written.
func TestCollimatorsAPI(t *testing.T) {
	e := newEnv(t)
	var m halfmark.Machine
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Linac Godwit","mlc_leaf_pairs":60,
		"collimators":{"upper_jaws":"Y","upper_scd_cm":28,"lower_scd_cm":37,"mlc_scd_cm":50}}`, 201, &m)
	if m.Collimators == nil || m.Collimators.UpperSCDcm != 28 || m.Collimators.UpperJaws != "Y" {
		t.Fatalf("created %+v", m.Collimators)
	}
	before := e.count("machines")
	st, _, b := e.do("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Linac Bad","collimators":{"upper_jaws":"Y","upper_scd_cm":40,"lower_scd_cm":30}}`)
	if st != 422 || !hasField(t, b, "collimators.lower_scd_cm") {
		t.Errorf("upper below lower: %d %s", st, b)
	}
	if e.count("machines") != before {
		t.Error("a refused machine was stored")
	}
	path := fmt.Sprintf("/api/v1/machines/%d", m.ID)
	good := `{"collimators":{"upper_jaws":"X","upper_scd_cm":30,"lower_scd_cm":40,"mlc_scd_cm":25}}`
	for role, want := range map[halfmark.Role]int{"": 401, halfmark.RoleTherapist: 403, halfmark.RolePhysicist: 403} {
		if st, _, b := e.do("PATCH", path, role, good); st != want {
			t.Errorf("PATCH as %q: %d, want %d: %s", role, st, want, b)
		}
	}
	for body, field := range map[string]string{
		`{}`: "collimators",
		`{"collimators":{"upper_jaws":"Z","upper_scd_cm":30,"lower_scd_cm":40,"mlc_scd_cm":25}}`:  "collimators.upper_jaws",
		`{"collimators":{"upper_jaws":"X","upper_scd_cm":30,"lower_scd_cm":140,"mlc_scd_cm":25}}`: "collimators.lower_scd_cm",
		`{"collimators":{"upper_jaws":"X","upper_scd_cm":0,"lower_scd_cm":40,"mlc_scd_cm":25}}`:   "collimators.upper_scd_cm",
		`{"collimators":{"upper_jaws":"X","upper_scd_cm":30,"lower_scd_cm":40}}`:                  "collimators.mlc_scd_cm",
	} {
		st, _, b := e.do("PATCH", path, halfmark.RoleAdmin, body)
		if st != 422 || !hasField(t, b, field) {
			t.Errorf("%s: %d %s, want 422 naming %s", body, st, b, field)
		}
	}
	var got halfmark.Machine
	e.mustDo("GET", path, halfmark.RoleTherapist, "", 200, &got)
	if got.Collimators.UpperJaws != "Y" {
		t.Fatalf("a refused PATCH changed the machine: %+v", got.Collimators)
	}
	e.mustDo("PATCH", path, halfmark.RoleAdmin, good, 200, &got)
	if *got.Collimators != (halfmark.Collimators{UpperJaws: "X", UpperSCDcm: 30, LowerSCDcm: 40, MLCSCDcm: 25}) {
		t.Fatalf("patched %+v", got.Collimators)
	}
	if st, _, _ := e.do("PATCH", "/api/v1/machines/999999", halfmark.RoleAdmin, good); st != 404 {
		t.Errorf("unknown machine: %d", st)
	}
	var entries struct{ Entries []halfmark.AuditEntry }
	e.mustDo("GET", fmt.Sprintf("/api/v1/audit?entity=machine&entity_id=%d", m.ID), halfmark.RolePhysicist, "", 200, &entries)
	n := 0
	for _, a := range entries.Entries {
		if a.Action == "set-collimators" {
			n++
		}
	}
	if n != 1 {
		t.Errorf("%d set-collimators audit rows, want 1: %+v", n, entries)
	}
}

// synthScans records sessions of scans generated from the stated model
// with known values (an analytic check): σ_s 0.6 mm, R(d) = 2.0 + 0.07·d mm,
// upper jaws Y at 28 cm, lower X at 37 cm, MLC at 50 cm, noise 0.08 mm.
func synthScans(t *testing.T, e *env, machineID, beamID int64, setups [][2]float64, sessions int) {
	t.Helper()
	g := penumbra.Geometry{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50}
	rng := rand.New(rand.NewPCG(4, 2))
	t0 := time.Date(2026, 1, 5, 9, 0, 0, 0, time.UTC)
	var cs []halfmark.Check
	for k := 0; k < sessions; k++ {
		for si, s := range setups {
			ssd, d := s[0], s[1]
			c := halfmark.Check{Method: halfmark.MethodScan, MachineID: machineID, BeamID: beamID, Kind: halfmark.KindMonthly,
				MeasuredAt: t0.AddDate(0, 0, k).Add(time.Duration(si) * time.Minute),
				Setup:      halfmark.Setup{SSDcm: &ssd, DepthCm: &d, FieldXcm: ptr(20.0), FieldYcm: ptr(20.0)}}
			for _, edge := range []string{"X1", "X2", "Y1", "Y2", "B1P30", "B2P30"} {
				coll, _ := g.CollimatorOf(edge)
				gw := penumbra.SourceWidth8020(0.6, penumbra.Magnification(ssd, d, g.SCD(coll)))
				r := 2.0 + 0.07*d
				v := math.Round((math.Sqrt(gw*gw+r*r)+0.08*rng.NormFloat64())*1000) / 1000
				c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: edge, PositionMM: 100, PenumbraMM: ptr(v)})
			}
			cs = append(cs, c)
		}
	}
	if _, err := e.db.RecordBatch(context.Background(), halfmark.CLIActor("test"), cs); err != nil {
		t.Fatal(err)
	}
}

func ptr(v float64) *float64 { return &v }

func TestPenumbraModelAPI(t *testing.T) {
	e := newEnv(t)
	var m halfmark.Machine
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Linac Godwit","mlc_leaf_pairs":60}`, 201, &m)
	var b halfmark.Beam
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", m.ID), halfmark.RoleAdmin, `{"energy_mv":6}`, 201, &b)
	path := fmt.Sprintf("/api/v1/beams/%d/penumbra-model", b.ID)

	// No points yet, then no geometry, then one setup only: 409 with the reason.
	if st, _, body := e.do("GET", path, halfmark.RoleTherapist, ""); st != 409 || !strings.Contains(string(body), "no penumbra") {
		t.Errorf("no points: %d %s", st, body)
	}
	synthScans(t, e, m.ID, b.ID, [][2]float64{{90, 10}}, 30)
	if st, _, body := e.do("GET", path, halfmark.RoleTherapist, ""); st != 409 || !strings.Contains(string(body), "collimator geometry") {
		t.Errorf("no geometry: %d %s", st, body)
	}
	e.mustDo("PATCH", fmt.Sprintf("/api/v1/machines/%d", m.ID), halfmark.RoleAdmin,
		`{"collimators":{"upper_jaws":"Y","upper_scd_cm":28,"lower_scd_cm":37,"mlc_scd_cm":50}}`, 200, nil)
	if st, _, body := e.do("GET", path, halfmark.RoleTherapist, ""); st != 409 || !strings.Contains(string(body), "one setup only") {
		t.Errorf("one setup: %d %s", st, body)
	}
	synthScans(t, e, m.ID, b.ID, [][2]float64{{100, 1.5}, {80, 20}}, 30)

	var got struct {
		BeamID          int64   `json:"beam_id"`
		Method          string  `json:"method"`
		SourceSigmaMM   float64 `json:"source_sigma_mm"`
		SourceSigmaSEMM float64 `json:"source_sigma_se_mm"`
		Radiological    struct {
			Form         string    `json:"form"`
			Coefficients []float64 `json:"coefficients"`
			SE           []float64 `json:"se"`
		} `json:"radiological"`
		PointsUsed    int        `json:"points_used"`
		RMSResidualMM float64    `json:"rms_residual_mm"`
		PeriodStart   *time.Time `json:"period_start"`
		Residuals     []penumbra.Residual
	}
	e.mustDo("GET", path, halfmark.RoleTherapist, "", 200, &got)
	if got.BeamID != b.ID || got.Method != "scan" || got.PointsUsed != 90*6 || got.PeriodStart != nil {
		t.Errorf("model %+v", got)
	}
	// Known values of the synthetic data (analytic check).
	if math.Abs(got.SourceSigmaMM-0.6) > 0.1 || got.SourceSigmaSEMM <= 0 || got.Radiological.Form != penumbra.FormLinear ||
		math.Abs(got.Radiological.Coefficients[0]-2.0) > 0.15 || math.Abs(got.Radiological.Coefficients[1]-0.07) > 0.02 ||
		len(got.Radiological.SE) != 2 || math.Abs(got.RMSResidualMM-0.08) > 0.015 || len(got.Residuals) != 9 {
		t.Errorf("model %+v", got)
	}
	e.mustDo("GET", path+"?method=scan", halfmark.RoleTherapist, "", 200, nil)
	for q, want := range map[string]int{"?method=film": 409, "?method=laser": 422, "?until=yesterday": 422} {
		if st, _, body := e.do("GET", path+q, halfmark.RoleTherapist, ""); st != want {
			t.Errorf("%s: %d, want %d: %s", q, st, want, body)
		}
	}
	for p, want := range map[string]int{"/api/v1/beams/999999/penumbra-model": 404, "/api/v1/beams/x/penumbra-model": 404} {
		if st, _, _ := e.do("GET", p, halfmark.RoleTherapist, ""); st != want {
			t.Errorf("%s: %d, want %d", p, st, want)
		}
	}
	if st, _, _ := e.do("GET", path, "", ""); st != 401 {
		t.Errorf("no token: %d", st)
	}

	// Prediction at a setup never measured, against the generating model.
	var pr struct {
		PenumbraMM float64    `json:"penumbra_mm"`
		IntervalMM [2]float64 `json:"interval_mm"`
	}
	e.mustDo("POST", path+"/predict", halfmark.RoleTherapist, `{"ssd_cm":120,"depth_cm":5,"collimator":"upper"}`, 200, &pr)
	gw := penumbra.SourceWidth8020(0.6, penumbra.Magnification(120, 5, 28))
	truth := math.Sqrt(gw*gw + math.Pow(2.0+0.07*5, 2))
	if math.Abs(pr.PenumbraMM-truth) > 0.1 || truth < pr.IntervalMM[0] || truth > pr.IntervalMM[1] {
		t.Errorf("predicted %+v, true %.3f mm", pr, truth)
	}
	for body, field := range map[string]string{
		`{"depth_cm":5,"collimator":"upper"}`:               "ssd_cm",
		`{"ssd_cm":20,"depth_cm":5,"collimator":"upper"}`:   "ssd_cm",
		`{"ssd_cm":100,"depth_cm":-2,"collimator":"upper"}`: "depth_cm",
		`{"ssd_cm":100,"collimator":"upper"}`:               "depth_cm",
		`{"ssd_cm":100,"depth_cm":5,"collimator":"side"}`:   "collimator",
	} {
		st, _, b := e.do("POST", path+"/predict", halfmark.RoleTherapist, body)
		if st != 422 || !hasField(t, b, field) {
			t.Errorf("%s: %d %s, want 422 naming %s", body, st, b, field)
		}
	}
	if st, _, _ := e.do("POST", path+"/predict", "", `{"ssd_cm":100,"depth_cm":5,"collimator":"mlc"}`); st != 401 {
		t.Errorf("no token: %d", st)
	}
}
