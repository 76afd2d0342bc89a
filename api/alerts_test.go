package api_test

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"net/http/httptest"
	"os"
	"path/filepath"
	"testing"
	"time"

	"halfmark"
	"halfmark/api"
	"halfmark/worker"
)

// driftEnv is a live API with the drift services on a throw-away database,
// with X1 of a 10×10 cm field stepped by 3 mm after 25 steady mornings and
// evaluated against a test book (tolerance 2 mm, action 2.5 mm: local
// choice), so the machine is at Level 3.
func newDriftEnv(t *testing.T) (*env, *worker.Worker) {
	e := newBenchEnv(t)
	ctx := context.Background()
	now := time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC)
	e.db.Now = func() time.Time { return now }
	p := filepath.Join(t.TempDir(), "t.toml")
	book := "[[limit]]\nquantity = \"position\"\nkind = \"default\"\ntolerance_mm = 2.0\naction_mm = 2.5\nsource = \"local choice (test)\"\n"
	if err := os.WriteFile(p, []byte(book), 0o644); err != nil {
		t.Fatal(err)
	}
	w, err := worker.New(e.db, worker.Config{TolerancesPath: p, Now: func() time.Time { return now }, Location: time.UTC},
		slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		t.Fatal(err)
	}
	e.srv.Close()
	e.srv = httptest.NewServer(api.New(api.Services{Machines: e.db, Checks: e.db, Series: e.db, Auth: e.db, Audit: e.db, Pinger: e.db,
		Alerts: e.db, Status: e.db, Events: e.db, Findings: e.db, Evaluations: e.db, Now: func() time.Time { return now }}))
	t.Cleanup(e.srv.Close)
	for k := 0; k < 26; k++ {
		at := now.AddDate(0, 0, k-26)
		x1 := 50.0 + 0.1*float64(k%3-1) // steady: 49.9, 50.0, 50.1 repeating
		if k == 25 {
			x1 += 3
		}
		c := halfmark.Check{MachineID: e.mach, BeamID: e.beam, Kind: halfmark.KindMorning, MeasuredAt: at,
			Setup: halfmark.Setup{FieldXcm: fp64(10), FieldYcm: fp64(10)},
			Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: x1}, {Edge: "X2", PositionMM: 50 + 0.1*float64((k+1)%3-1)}}}
		if _, _, err := e.db.RecordCheck(ctx, halfmark.CLIActor("test"), &c); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := w.Evaluate(ctx, true); err != nil {
		t.Fatal(err)
	}
	return e, w
}

func fp64(v float64) *float64 { return &v }

func TestStatusAlertsAndChart(t *testing.T) {
	e, _ := newDriftEnv(t)
	var st struct {
		Machines []halfmark.MachineStatus `json:"machines"`
	}
	e.mustDo("GET", "/api/v1/status", halfmark.RoleTherapist, "", 200, &st)
	if len(st.Machines) != 1 || st.Machines[0].Level != halfmark.LevelImmediate || st.Machines[0].Worst == nil ||
		st.Machines[0].Worst.Edge != "X1" || st.Machines[0].Worst.DeviationMM == nil {
		t.Fatalf("status %+v", st)
	}

	var list struct {
		Alerts []halfmark.Alert `json:"alerts"`
	}
	e.mustDo("GET", fmt.Sprintf("/api/v1/alerts?machine_id=%d&state=open", e.mach), halfmark.RoleTherapist, "", 200, &list)
	if len(list.Alerts) == 0 || list.Alerts[0].Level != halfmark.LevelImmediate || list.Alerts[0].Family != "limit" {
		t.Fatalf("alerts %+v", list.Alerts)
	}
	id := list.Alerts[0].ID
	if code, h, _ := e.do("GET", "/api/v1/alerts?state=closed", halfmark.RoleTherapist, ""); code != 422 || h.Get("Content-Type") != api.ProblemContentType {
		t.Errorf("bad state filter: %d %s, want 422 problem+json", code, h.Get("Content-Type"))
	}

	ack := fmt.Sprintf("/api/v1/alerts/%d/acknowledge", id)
	if code, _, _ := e.do("POST", ack, halfmark.RoleTherapist, `{"comment":"seen"}`); code != 403 {
		t.Errorf("therapist acknowledge: %d, want 403", code)
	}
	var al halfmark.Alert
	e.mustDo("POST", ack, halfmark.RolePhysicist, `{"comment":"seen"}`, 200, &al)
	if al.State != halfmark.AlertAcknowledged || al.AckComment != "seen" {
		t.Errorf("acknowledged alert %+v", al)
	}
	e.mustDo("POST", ack, halfmark.RolePhysicist, `{"comment":"again"}`, 409, nil)
	res := fmt.Sprintf("/api/v1/alerts/%d/resolve", id)
	e.mustDo("POST", res, halfmark.RolePhysicist, `{"comment":""}`, 422, nil)
	e.mustDo("POST", res, halfmark.RolePhysicist, `{"comment":"jaw recalibrated"}`, 200, &al)
	if al.State != halfmark.AlertResolved {
		t.Errorf("resolved alert %+v", al)
	}
	e.mustDo("POST", "/api/v1/alerts/999999/resolve", halfmark.RolePhysicist, `{"comment":"x"}`, 404, nil)

	// The chart document is the engine's stored evaluation, read as stored.
	var ch api.SeriesChartDocument
	sid := list.Alerts[0].SeriesID
	e.mustDo("GET", fmt.Sprintf("/api/v1/series/%d/chart", *sid), halfmark.RoleTherapist, "", 200, &ch)
	ev := ch.Evaluation
	if ev.Level != 3 || len(ev.Chart.Points) != 26 || ev.Chart.Points[0].EWMA == nil || ev.Limits == nil || ev.Limits.ActionMM != 2.5 ||
		ch.Series.ID != *sid {
		t.Errorf("chart: level %d, %d points, limits %+v", ev.Level, len(ev.Chart.Points), ev.Limits)
	}
	e.mustDo("GET", "/api/v1/series/999999/chart", halfmark.RoleTherapist, "", 404, nil)
}

// The findings API: one finding for the 3 mm step of jaw X1, read by
// therapists, acknowledged and resolved by physicists.
func TestFindingsAPI(t *testing.T) {
	e, _ := newDriftEnv(t)
	var list struct {
		Findings []halfmark.Finding `json:"findings"`
	}
	e.mustDo("GET", fmt.Sprintf("/api/v1/findings?machine_id=%d", e.mach), halfmark.RoleTherapist, "", 200, &list)
	if len(list.Findings) != 1 || list.Findings[0].Kind != halfmark.ComponentJaw || list.Findings[0].Name != "X1" ||
		list.Findings[0].Level != halfmark.LevelImmediate || len(list.Findings[0].Evidence) == 0 {
		t.Fatalf("findings %+v", list.Findings)
	}
	id := list.Findings[0].ID
	var st struct {
		Machines []halfmark.MachineStatus `json:"machines"`
	}
	e.mustDo("GET", "/api/v1/status", halfmark.RoleTherapist, "", 200, &st)
	if w := st.Machines[0].Worst; w == nil || w.FindingID == nil || *w.FindingID != id || st.Machines[0].Findings != 1 {
		t.Errorf("status %+v: want the worst to name finding %d and a count of 1", st.Machines[0], id)
	}
	for _, q := range []string{"state=closed", "machine_id=x"} {
		if code, h, _ := e.do("GET", "/api/v1/findings?"+q, halfmark.RoleTherapist, ""); code != 422 || h.Get("Content-Type") != api.ProblemContentType {
			t.Errorf("bad filter %s: %d, want 422 problem+json", q, code)
		}
	}
	var one halfmark.Finding
	e.mustDo("GET", fmt.Sprintf("/api/v1/findings/%d", id), halfmark.RoleTherapist, "", 200, &one)
	e.mustDo("GET", "/api/v1/findings/999999", halfmark.RoleTherapist, "", 404, nil)
	ack := fmt.Sprintf("/api/v1/findings/%d/acknowledge", id)
	e.mustDo("POST", ack, halfmark.RoleTherapist, `{"comment":"seen"}`, 403, nil)
	e.mustDo("POST", ack, halfmark.RolePhysicist, `{"comment":"seen"}`, 200, &one)
	if one.State != halfmark.FindingAcknowledged || one.AckComment != "seen" {
		t.Errorf("acknowledged %+v", one)
	}
	e.mustDo("POST", ack, halfmark.RolePhysicist, `{"comment":"again"}`, 409, nil)
	res := fmt.Sprintf("/api/v1/findings/%d/resolve", id)
	e.mustDo("POST", res, halfmark.RolePhysicist, `{"comment":""}`, 422, nil)
	e.mustDo("POST", res, halfmark.RolePhysicist, `{"comment":"jaw recalibrated"}`, 200, &one)
	e.mustDo("GET", "/api/v1/findings?state=resolved", halfmark.RoleTherapist, "", 200, &list)
	if len(list.Findings) != 1 || list.Findings[0].State != halfmark.FindingResolved {
		t.Errorf("resolved findings %+v", list.Findings)
	}
	e.mustDo("GET", "/api/v1/findings", halfmark.RoleTherapist, "", 200, &list)
	if len(list.Findings) != 0 {
		t.Errorf("%d active findings after resolving the only one", len(list.Findings))
	}
}

func TestServiceEventsAPI(t *testing.T) {
	e, _ := newDriftEnv(t)
	path := fmt.Sprintf("/api/v1/machines/%d/service-events", e.mach)
	body := `{"at":"2026-03-01T15:00:00Z","note":"X1 jaw recalibrated","edges":["X1"],"new_baseline":true}`
	if code, _, _ := e.do("POST", path, halfmark.RoleTherapist, body); code != 403 {
		t.Errorf("therapist service event: %d, want 403", code)
	}
	var ev halfmark.ServiceEvent
	e.mustDo("POST", path, halfmark.RolePhysicist, body, 201, &ev)
	if ev.ID == 0 || !ev.NewBaseline || len(ev.Edges) != 1 {
		t.Errorf("event %+v", ev)
	}
	e.mustDo("POST", path, halfmark.RolePhysicist, `{"note":"x","edges":["Z9"]}`, 422, nil)
	e.mustDo("POST", "/api/v1/machines/999999/service-events", halfmark.RolePhysicist, `{"note":"x"}`, 404, nil)
	var list struct {
		Events []halfmark.ServiceEvent `json:"service_events"`
	}
	e.mustDo("GET", path, halfmark.RoleTherapist, "", 200, &list)
	if len(list.Events) != 1 || list.Events[0].Note != "X1 jaw recalibrated" {
		t.Errorf("events %+v", list.Events)
	}
}
