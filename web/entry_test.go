package web_test

import (
	"context"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"testing"

	"halfmark"
	"halfmark/web"
)

// fakeEvals stands in for the drift engine's stored evaluations (the
// database serves them once the engine stores them): fixed answers per
// series.
type fakeEvals struct {
	mu sync.Mutex
	m  map[int64]halfmark.SeriesEvaluation
}

func (f *fakeEvals) SeriesEvaluation(_ context.Context, id int64) (halfmark.SeriesEvaluation, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	ev, ok := f.m[id]
	if !ok {
		return ev, halfmark.Errorf(halfmark.ENotFound, "series %d has not been evaluated", id)
	}
	return ev, nil
}

func (h *harness) jawSeries(bid int64) map[string]int64 {
	h.t.Helper()
	out := map[string]int64{}
	for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
		out[e] = h.seriesID(bid, e, halfmark.QPosition)
	}
	return out
}

// nChecks counts stored checks, superseded ones included.
func (h *harness) nChecks() int { return len(h.checks("")) }

// superseding counts the checks that correct check id.
func (h *harness) superseding(id string) int {
	n := 0
	for _, c := range h.checks("") {
		if c.Supersedes == id {
			n++
		}
	}
	return n
}

// correctionAudited reports whether the audit log holds a "correct" row
// for a check superseding id whose note carries the reason.
func (h *harness) correctionAudited(id, reason string) bool {
	h.t.Helper()
	es, err := h.db.Audit(h.ctx, "check", "", 1000)
	if err != nil {
		h.t.Fatal(err)
	}
	for _, e := range es {
		note, _ := e.Detail["note"].(string)
		if e.Action == "correct" && e.Detail["supersedes"] == id && strings.Contains(note, reason) {
			return true
		}
	}
	return false
}

// The morning verdict is the engine's stored evaluation of each touched
// series, word for word: X1 shows the Level 3 the store holds (large, with
// the instruction), Y1 shows "in control" although 50.4 is the same kind
// of value, and Y2, which the store has not evaluated yet, shows
// "evaluation pending" — the page judges nothing itself.
func TestMorningVerdictFromEngine(t *testing.T) {
	evals := &fakeEvals{m: map[int64]halfmark.SeriesEvaluation{}}
	h := newHarness(t, harnessOpts{evals: evals})
	mid, bids := h.machine("Linac A", 6)
	h.history(mid, bids[0], 5, func(int) float64 { return 0 })
	ids := h.jawSeries(bids[0])
	checkID := "6f1c0d3e-2b4a-4c5d-8e9f-0a1b2c3d4e5f"
	dev := 3.5
	lim := &halfmark.Limits{ToleranceMM: 2, ActionMM: 3}
	pt := []halfmark.ChartPoint{{CheckID: checkID}}
	evals.m[ids["X1"]] = halfmark.SeriesEvaluation{Level: halfmark.LevelImmediate, Verdict: halfmark.VerdictSignal, Rule: "beyond action limit (|3.50| > 3.00 mm)",
		DeviationMM: &dev, Limits: lim, Chart: halfmark.SeriesChart{Points: pt}}
	evals.m[ids["X2"]] = halfmark.SeriesEvaluation{Verdict: halfmark.VerdictWithinTolerance, Limits: lim, Chart: halfmark.SeriesChart{Points: pt}}
	evals.m[ids["Y1"]] = halfmark.SeriesEvaluation{Verdict: halfmark.VerdictInControl, Limits: lim, Chart: halfmark.SeriesChart{Points: pt}}
	// A stale evaluation (of an older check) is not this check's verdict.
	evals.m[ids["Y2"]] = halfmark.SeriesEvaluation{Verdict: halfmark.VerdictInControl, Limits: lim, Chart: halfmark.SeriesChart{Points: []halfmark.ChartPoint{{CheckID: "older"}}}}

	th := h.signIn("therapist@example.org")
	f := entryForm(mid, bids[0], "53.5", "50.1", "50.4", "49.9")
	f.Set("check_id", checkID)
	code, body, _ := th.postWithToken("/entry", "/entry", f)
	must(t, code == http.StatusOK, "entry: %d %s", code, body)
	for _, s := range []string{`id="verdict-alarm"`, "Level 3 — immediate action", web.DefaultInstruction, "a local choice",
		"beyond action limit (3.50 > 3.00 mm)", "+3.50", "within tolerance (control-chart tests not run)", "in control", "evaluation pending"} {
		must(t, strings.Contains(body, s), "verdict lacks %q:\n%s", s, body)
	}
	must(t, !strings.Contains(body, "|3.50|"), "absolute-value bars in the verdict")
}

// Positions far from the nominal half-field (field size / 2: a 10 cm
// field puts each jaw 50 mm from the axis, common practice) ask for
// confirmation; a value ten times too small is named as typed in cm.
// Nothing is saved until confirmed.
func TestPlausibilityPrompt(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, bids := h.machine("Linac A", 6)
	th := h.signIn("therapist@example.org")
	before := h.nChecks()
	f := entryForm(mid, bids[0], "5.0", "5", "5.0", "5")
	code, body, _ := th.postWithToken("/entry", "/entry", f)
	must(t, code == http.StatusOK && strings.Contains(body, `id="plausibility"`), "cm entry: %d", code)
	for _, s := range []string{"X1 = 5 mm is 45 mm from the nominal half-field of 50 mm (a 10 cm field)", "It looks typed in cm: 5 cm is 50 mm",
		"4 values look typed in cm", "Save as typed"} {
		must(t, strings.Contains(body, s), "prompt lacks %q", s)
	}
	must(t, h.nChecks() == before, "saved before confirmation")
	// 60.5 mm is 10.5 mm out: asked, but not as cm; 59.9 is within 10 mm.
	code, body, _ = th.postWithToken("/entry", "/entry", entryForm(mid, bids[0], "60.5", "59.9", "50", "50"))
	must(t, code == http.StatusOK && strings.Contains(body, "X1 = 60.5 mm is 10.5 mm from") && !strings.Contains(body, "X2 =") &&
		!strings.Contains(body, "typed in cm"), "60.5 mm prompt")
	must(t, h.nChecks() == before, "saved before confirmation")
	f.Set("confirm", "1")
	code, body, _ = th.postWithToken("/entry", "/entry", f)
	must(t, code == http.StatusOK && strings.Contains(body, "Saved"), "confirmed: %d", code)
	must(t, h.nChecks() == before+1, "not saved after confirmation")
	code, body, _ = th.postWithToken("/entry", "/entry", entryForm(mid, bids[0], "50.1", "49.9", "50", "50"))
	must(t, code == http.StatusOK && !strings.Contains(body, `id="plausibility"`) && strings.Contains(body, "Saved"), "plain values asked")
}

// A wrong check is corrected from the dashboard: the form comes prefilled,
// a reason is required, and the new check supersedes the old one — the
// series keeps only the corrected value, the record keeps both, and the
// audit row says "correct" with the reason.
func TestCorrectionFromDashboard(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, bids := h.machine("Linac A", 6)
	th := h.signIn("therapist@example.org")
	f := entryForm(mid, bids[0], "5.0", "5.0", "5.0", "5.0")
	f.Set("confirm", "1")
	wrong := "0d9b8c7a-6e5f-4d3c-9b2a-1f0e9d8c7b6a"
	f.Set("check_id", wrong)
	code, _, _ := th.postWithToken("/entry", "/entry", f)
	must(t, code == http.StatusOK, "wrong check: %d", code)

	code, body, _ := th.get("/entry?correct=" + wrong)
	must(t, code == http.StatusOK && strings.Contains(body, "Correcting check "+wrong) && strings.Contains(body, `name="supersedes" value="`+wrong+`"`) &&
		strings.Contains(body, `id="x1" name="x1" inputmode="decimal" enterkeyhint="next" value="5"`), "correction form: %d", code)
	fix := entryForm(mid, bids[0], "50.0", "50.1", "49.9", "50.0")
	fix.Set("supersedes", wrong)
	before := h.nChecks()
	code, body, _ = th.postWithToken("/entry?correct="+wrong, "/entry", fix)
	must(t, code == http.StatusUnprocessableEntity && strings.Contains(body, `id="err-reason"`), "correction without a reason: %d", code)
	must(t, h.nChecks() == before, "a correction without a reason was saved")
	fix.Set("reason", "typed in cm")
	code, body, _ = th.postWithToken("/entry?correct="+wrong, "/entry", fix)
	must(t, code == http.StatusOK && strings.Contains(body, "corrects check "+wrong), "correction: %d %s", code, body)
	must(t, h.superseding(wrong) == 1, "the correction does not supersede the wrong check")
	must(t, h.nChecks() == before+1, "both checks are not in the record")
	pts, err := h.db.Points(h.ctx, h.seriesID(bids[0], "X1", halfmark.QPosition))
	must(t, err == nil && len(pts) == 1 && pts[0].Value > 49, "the X1 series holds %+v; want only the corrected 50 mm (%v)", pts, err)
	must(t, h.correctionAudited(wrong, "typed in cm"), "no audit row with the reason")
	code, _, _ = th.get("/entry?correct=" + wrong)
	must(t, code == http.StatusConflict, "correcting an already corrected check: %d", code)
}

var _ = url.Values{}
var _ = fmt.Sprint
