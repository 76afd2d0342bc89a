package web_test

import (
	"context"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"

	"halfmark"
)

// fakeFindings keeps findings in memory with the documented lifecycle
// (open → acknowledged → resolved); the database serves them once the
// drift engine stores them.
type fakeFindings struct {
	mu sync.Mutex
	fs []halfmark.Finding
}

func (f *fakeFindings) Findings(_ context.Context, flt halfmark.FindingFilter) ([]halfmark.Finding, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []halfmark.Finding
	for _, x := range f.fs {
		if (flt.MachineID == 0 || x.MachineID == flt.MachineID) && (flt.State == "all" || (flt.State == "active" && x.Active()) || string(x.State) == flt.State) {
			out = append(out, x)
		}
	}
	return out, nil
}

func (f *fakeFindings) Finding(_ context.Context, id int64) (halfmark.Finding, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for _, x := range f.fs {
		if x.ID == id {
			return x, nil
		}
	}
	return halfmark.Finding{}, halfmark.Errorf(halfmark.ENotFound, "finding %d does not exist", id)
}

func (f *fakeFindings) move(id int64, fn func(*halfmark.Finding) error) (halfmark.Finding, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for i := range f.fs {
		if f.fs[i].ID == id {
			err := fn(&f.fs[i])
			return f.fs[i], err
		}
	}
	return halfmark.Finding{}, halfmark.Errorf(halfmark.ENotFound, "finding %d does not exist", id)
}

func (f *fakeFindings) AcknowledgeFinding(_ context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Finding, error) {
	return f.move(id, func(x *halfmark.Finding) error {
		if x.State != halfmark.FindingOpen {
			return halfmark.Errorf(halfmark.EConflict, "finding %d is %s, not open", id, x.State)
		}
		now := time.Now()
		x.State, x.AckBy, x.AckAt, x.AckComment = halfmark.FindingAcknowledged, a.Name, &now, comment
		return nil
	})
}

func (f *fakeFindings) ResolveFinding(_ context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Finding, error) {
	return f.move(id, func(x *halfmark.Finding) error {
		now := time.Now()
		x.State, x.ResolvedBy, x.ResolvedAt, x.ResolveComment = halfmark.FindingResolved, a.Name, &now, comment
		return nil
	})
}

func bankFinding(mid, sid int64) halfmark.Finding {
	onset := time.Date(2026, 10, 28, 0, 0, 0, 0, time.UTC)
	dev := -0.92
	return halfmark.Finding{ID: 41, MachineID: mid, Machine: "Heron", Component: halfmark.Component{Kind: halfmark.ComponentMLCBank, Name: "bank 2"},
		Level: halfmark.LevelScheduled, State: halfmark.FindingOpen, MagnitudeMM: -0.92, MagnitudeCIMM: [2]float64{-1.04, -0.8},
		Onset: &onset, Crossing: halfmark.FindingCrossing{Status: halfmark.CrossingAlreadyBeyond},
		Evidence: []halfmark.Evidence{{SeriesID: sid, Beam: "6 MV", Geometry: "10×10 cm, iso", Method: halfmark.MethodEPID, Edge: "B2P29",
			Quantity: halfmark.QPosition, Rules: []string{"limit", "cusum"}, Level: halfmark.LevelScheduled, DeviationMM: &dev}},
		Message: "bank 2 mean beyond tolerance (|-0.92| > 0.80 mm)", OpenedAt: time.Date(2026, 11, 2, 8, 0, 0, 0, time.UTC)}
}

// The findings list and a finding's page: component, level, magnitude with
// its interval, onset, crossing and evidence series linked to their pages;
// physicists acknowledge and resolve (a comment required to resolve),
// therapists see no forms.
func TestFindingPages(t *testing.T) {
	ff := &fakeFindings{}
	h := newHarness(t, harnessOpts{findings: ff})
	mid, _ := h.machine("Heron", 6)
	ff.fs = append(ff.fs, bankFinding(mid, 9))
	th := h.signIn("therapist@example.org")
	code, body, _ := th.get("/findings")
	must(t, code == http.StatusOK && strings.Contains(body, `<a href="/findings/41">MLC bank 2</a>`) && strings.Contains(body, "Level 2"), "list: %d", code)
	code, body, _ = th.get("/findings/41")
	for _, s := range []string{"MLC bank 2", "Level 2 — scheduled action", "−0.92 mm (95% interval −1.04 to −0.80 mm)", "2026-10-28",
		"already beyond tolerance", `<a href="/series/9">`, "limit, cusum", "−0.92 > 0.80 mm", "not yet handled"} {
		must(t, strings.Contains(body, s), "finding page lacks %q", s)
	}
	must(t, code == http.StatusOK && !strings.Contains(body, `id="acknowledge"`), "therapist sees the lifecycle forms")
	code, _, _ = th.get("/findings/999")
	must(t, code == http.StatusNotFound, "unknown finding: %d", code)
	code, _, _ = th.get("/findings?state=bogus")
	must(t, code == http.StatusBadRequest, "bad state: %d", code)

	ph := h.signIn("physicist@example.org")
	code, body, _ = ph.postWithToken("/findings/41", "/findings/41/resolve", url.Values{"comment": {""}})
	must(t, code == http.StatusUnprocessableEntity && strings.Contains(body, "Say why"), "resolve without a comment: %d", code)
	code, _, hdr := ph.postWithToken("/findings/41", "/findings/41/acknowledge", url.Values{"comment": {"service booked"}})
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == "/findings/41", "acknowledge: %d", code)
	_, body, _ = ph.get("/findings/41")
	must(t, strings.Contains(body, "acknowledged by physicist@example.org") && strings.Contains(body, "service booked"), "handling not shown")
	code, body, _ = ph.postWithToken("/findings/41", "/findings/41/acknowledge", url.Values{"comment": {"again"}})
	must(t, code == http.StatusUnprocessableEntity && strings.Contains(body, "not open"), "second acknowledge: %d", code)
	code, _, _ = ph.postWithToken("/findings/41", "/findings/41/resolve", url.Values{"comment": {"bank recalibrated, picket fence repeated"}})
	must(t, code == http.StatusSeeOther, "resolve: %d", code)
	_, body, _ = th.get("/findings?state=resolved")
	must(t, strings.Contains(body, "/findings/41"), "resolved finding not listed")
	_, body, _ = th.get("/findings")
	must(t, !strings.Contains(body, "/findings/41"), "resolved finding listed as active")
}

// A notification's link (/findings/{id}) survives the sign-in redirect:
// the sign-in page carries next= and lands on the finding.
func TestFindingLinkAfterSignIn(t *testing.T) {
	ff := &fakeFindings{}
	h := newHarness(t, harnessOpts{findings: ff})
	mid, _ := h.machine("Heron", 6)
	ff.fs = append(ff.fs, bankFinding(mid, 9))
	c := h.client()
	code, _, hdr := c.get("/findings/41")
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == "/login?next=%2Ffindings%2F41", "anonymous: %d %q", code, hdr.Get("Location"))
	code, _, hdr = c.postWithToken("/login?next=%2Ffindings%2F41", "/login", url.Values{"email": {"therapist@example.org"}, "password": {testPassword}, "next": {"/findings/41"}})
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == "/findings/41", "after sign-in: %d %q", code, hdr.Get("Location"))
	code, body, _ := c.get(hdr.Get("Location"))
	must(t, code == http.StatusOK && strings.Contains(body, "Finding 41"), "finding page: %d", code)
	_ = fmt.Sprint
}

// Links of notifications sent before findings (/alerts, /alerts/{id}) open
// real pages: the findings list and the alert's series.
func TestOldAlertLinksLand(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, _ := h.machine("Heron", 6)
	sid := int64(12)
	h.alerts.alerts = append(h.alerts.alerts, halfmark.Alert{ID: 5, MachineID: mid, SeriesID: &sid, Level: halfmark.LevelInspect, State: halfmark.AlertOpen})
	th := h.signIn("therapist@example.org")
	code, _, hdr := th.get("/alerts/5")
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == "/series/12", "alert link: %d %q", code, hdr.Get("Location"))
	code, _, hdr = th.get("/alerts")
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == "/findings", "alerts link: %d %q", code, hdr.Get("Location"))
	code, _, _ = th.get("/alerts/77")
	must(t, code == http.StatusNotFound, "unknown alert: %d", code)
}

// With the drift engine and the store's own findings (no stand-in): a
// jaw that steps 2.5 mm outward after 20 steady days (an analytic
// scenario: the step is 25 times the 0.1 mm wobble) gives a finding whose
// page opens, names the jaw and links its evidence series.
func TestFindingPagesWithEngine(t *testing.T) {
	h := newHarness(t, harnessOpts{engine: true})
	mid, bids := h.machine("Linac Drift", 6)
	h.history(mid, bids[0], 30, func(i int) float64 {
		if i >= 20 {
			return 2.5
		}
		return 0
	})
	h.evaluate()
	fs, err := h.db.Findings(h.ctx, halfmark.FindingFilter{MachineID: mid, State: "active"})
	must(t, err == nil && len(fs) > 0, "the engine opened no finding (%v)", err)
	var jaw *halfmark.Finding
	for i := range fs {
		if fs[i].Kind == halfmark.ComponentJaw && fs[i].Name == "X2" {
			jaw = &fs[i]
		}
	}
	must(t, jaw != nil, "no finding for jaw X2 among %+v", fs)
	th := h.signIn("therapist@example.org")
	code, body, _ := th.get("/findings")
	must(t, code == http.StatusOK && strings.Contains(body, fmt.Sprintf(`<a href="/findings/%d">jaw X2</a>`, jaw.ID)), "list: %d", code)
	code, body, _ = th.get(fmt.Sprintf("/findings/%d", jaw.ID))
	must(t, code == http.StatusOK && strings.Contains(body, "jaw X2") && strings.Contains(body, jaw.Level.String()), "finding page: %d", code)
	for _, e := range jaw.Evidence {
		must(t, strings.Contains(body, fmt.Sprintf(`<a href="/series/%d">`, e.SeriesID)), "evidence series %d not linked", e.SeriesID)
		code, _, _ := th.get(fmt.Sprintf("/series/%d", e.SeriesID))
		must(t, code == http.StatusOK, "evidence series page %d: %d", e.SeriesID, code)
	}
}
