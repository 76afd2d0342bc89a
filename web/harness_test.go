package web_test

import (
	"context"
	"fmt"
	"html"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/cookiejar"
	"net/http/httptest"
	"net/url"
	neturl "net/url"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/tolerance"
	"halfmark/api"
	"halfmark/db"
	"halfmark/db/dbtest"
	"halfmark/web"
	"halfmark/worker"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// book is a tolerance book for tests. The position tolerance of 2 mm is
// AAPM TG-142's daily collimator-size tolerance (Klein et al., Med Phys
// 36:4197, 2009, Table II); the 3 mm action limit and the penumbra limits
// are local choices, as TG-142 sets none.
type book struct{ shipped bool }

func (b book) Limits(q halfmark.Quantity, kind halfmark.CheckKind, edge string, asym bool) (halfmark.Limits, bool) {
	switch q {
	case halfmark.QPosition:
		return halfmark.Limits{ToleranceMM: 2, ActionMM: 3, Source: "AAPM TG-142 Table II (daily)"}, true
	case halfmark.QPenumbra:
		return halfmark.Limits{ToleranceMM: 1, ActionMM: 2, Source: "local choice"}, true
	}
	return halfmark.Limits{}, false
}
func (b book) Hash() string { return strings.Repeat("ab", 32) }
func (b book) Source() string {
	if b.shipped {
		return "shipped example tolerances"
	}
	return "tolerances.toml (test)"
}
func (b book) IsShippedExample() bool { return b.shipped }

// fakeStatus serves fixed front-page rows (the drift engine's
// StatusService is built elsewhere).
type fakeStatus struct{ rows []halfmark.MachineStatus }

func (f *fakeStatus) Status(context.Context) ([]halfmark.MachineStatus, error) {
	out := make([]halfmark.MachineStatus, len(f.rows))
	copy(out, f.rows)
	return out, nil
}

// fakeAlerts keeps alerts in memory with the documented lifecycle.
type fakeAlerts struct {
	mu     sync.Mutex
	alerts []halfmark.Alert
}

func (f *fakeAlerts) Alerts(_ context.Context, flt halfmark.AlertFilter) ([]halfmark.Alert, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []halfmark.Alert
	for _, a := range f.alerts {
		if flt.MachineID != 0 && a.MachineID != flt.MachineID {
			continue
		}
		if flt.SeriesID != 0 && (a.SeriesID == nil || *a.SeriesID != flt.SeriesID) {
			continue
		}
		if len(flt.States) == 0 && a.State == halfmark.AlertResolved {
			continue
		}
		out = append(out, a)
	}
	return out, nil
}
func (f *fakeAlerts) Alert(_ context.Context, id int64) (halfmark.Alert, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for _, a := range f.alerts {
		if a.ID == id {
			return a, nil
		}
	}
	return halfmark.Alert{}, halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
}
func (f *fakeAlerts) Acknowledge(_ context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Alert, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for i := range f.alerts {
		if f.alerts[i].ID == id {
			if f.alerts[i].State != halfmark.AlertOpen {
				return halfmark.Alert{}, halfmark.Errorf(halfmark.EConflict, "alert %d is not open", id)
			}
			now := time.Now()
			f.alerts[i].State, f.alerts[i].AckBy, f.alerts[i].AckAt, f.alerts[i].AckComment = halfmark.AlertAcknowledged, a.Name, &now, comment
			return f.alerts[i], nil
		}
	}
	return halfmark.Alert{}, halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
}
func (f *fakeAlerts) Resolve(_ context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Alert, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for i := range f.alerts {
		if f.alerts[i].ID == id {
			now := time.Now()
			f.alerts[i].State, f.alerts[i].ResolvedBy, f.alerts[i].ResolvedAt, f.alerts[i].ResolveComment = halfmark.AlertResolved, a.Name, &now, comment
			return f.alerts[i], nil
		}
	}
	return halfmark.Alert{}, halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
}

const testPassword = "a long test password"

// harness is a real server (API + dashboard) on a throw-away database.
type harness struct {
	t      testing.TB
	db     *db.DB
	srv    *httptest.Server
	status *fakeStatus
	alerts *fakeAlerts
	book   *book
	ctx    context.Context
}

type harnessOpts struct {
	shipped bool
	// engine wires the real drift engine: db.DB's StatusService,
	// AlertService and service events, and the worker's shipped tolerances.
	engine bool
	// proxies trusts 127.0.0.0/8 as a reverse proxy (X-Forwarded-For and
	// X-Forwarded-Proto are then believed).
	proxies bool
	// findings and evals stand in for the drift engine's stored findings
	// and evaluations until the database serves them.
	findings halfmark.FindingService
	evals    halfmark.EvaluationService
}

func newHarness(t testing.TB, o harnessOpts) *harness {
	t.Helper()
	ownerURL := dbtest.New(t)
	ctx := context.Background()
	// The dashboard runs as the runtime role, with the service's grants only.
	const role, pw = "halfmark_app_webtest", "webtest-password"
	if err := db.MigrateWith(ctx, ownerURL, db.MigrateOptions{AppRole: role, AppPassword: pw}, nil); err != nil {
		t.Fatal(err)
	}
	u, err := neturl.Parse(ownerURL)
	if err != nil {
		t.Fatal(err)
	}
	u.User = neturl.UserPassword(role, pw)
	d, err := db.Open(ctx, u.String())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	h := &harness{t: t, db: d, status: &fakeStatus{}, alerts: &fakeAlerts{}, book: &book{shipped: o.shipped}, ctx: ctx}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	var proxies []*net.IPNet
	if o.proxies {
		_, loopback, _ := net.ParseCIDR("127.0.0.0/8")
		proxies = append(proxies, loopback)
	}
	e := api.New(api.Services{Machines: d, Checks: d, Series: d, Auth: d, Audit: d, Pinger: d, Raw: d, Log: log, TrustedProxies: proxies, Penumbra: d})
	deps := web.Deps{Machines: d, Checks: d, Series: d, Users: d, Sessions: d, SignOffs: d, Raw: d,
		Alerts: h.alerts, Audit: d, Tolerances: h.book, Log: log, TrustedProxies: proxies, Penumbra: d,
		Findings: d, Evaluations: d, Verdicts: d, Import: d, Export: d, Reports: d}
	// Stand-ins for the engine's stored findings and evaluations, where a
	// test needs answers the engine would not give on its data.
	if o.findings != nil {
		deps.Findings = o.findings
	}
	if o.evals != nil {
		deps.Evaluations = o.evals
	}
	deps.Status = h.status
	if o.engine {
		deps.Status, deps.Alerts, deps.Events, deps.Tolerances = d, d, d, tolerance.Shipped()
	}
	if err := web.Register(e, deps); err != nil {
		t.Fatal(err)
	}
	h.srv = httptest.NewServer(e)
	t.Cleanup(h.srv.Close)
	for _, u := range []struct {
		email string
		role  halfmark.Role
	}{{"therapist@example.org", halfmark.RoleTherapist}, {"physicist@example.org", halfmark.RolePhysicist}, {"admin@example.org", halfmark.RoleAdmin}} {
		if _, err := d.CreateUser(ctx, halfmark.CLIActor("test"), u.email, u.role, testPassword); err != nil {
			t.Fatal(err)
		}
	}
	return h
}

// machine creates a machine with the given beams (MV) and returns ids.
func (h *harness) machine(name string, mv ...float64) (int64, []int64) {
	h.t.Helper()
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: name, Model: "test linac", MLCLeafPairs: 60, MLCLayout: "60"}
	if err := h.db.CreateMachine(h.ctx, a, &m); err != nil {
		h.t.Fatal(err)
	}
	var ids []int64
	for _, e := range mv {
		b := halfmark.Beam{MachineID: m.ID, EnergyMV: e}
		if err := h.db.CreateBeam(h.ctx, a, &b); err != nil {
			h.t.Fatal(err)
		}
		ids = append(ids, b.ID)
	}
	return m.ID, ids
}

// history records n daily morning checks of a 10×10 field ending
// yesterday; drift(i) is added to X2.
func (h *harness) history(mid, bid int64, n int, drift func(i int) float64) {
	h.t.Helper()
	ten := 10.0
	start := time.Now().Add(-time.Duration(n) * 24 * time.Hour)
	cs := make([]halfmark.Check, n)
	for i := range cs {
		wob := 0.05 * float64((i*7)%5-2) // a small deterministic wobble, ±0.1 mm
		cs[i] = halfmark.Check{MachineID: mid, BeamID: bid, Kind: halfmark.KindMorning, MeasuredAt: start.Add(time.Duration(i) * 24 * time.Hour),
			Device: "daily device", Operator: "seed", Setup: halfmark.Setup{FieldXcm: &ten, FieldYcm: &ten},
			Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50 + wob}, {Edge: "X2", PositionMM: 50 - wob + drift(i)},
				{Edge: "Y1", PositionMM: 50 + wob/2}, {Edge: "Y2", PositionMM: 50 - wob/2}}}
	}
	if _, err := h.db.RecordBatch(h.ctx, halfmark.CLIActor("seed"), cs); err != nil {
		h.t.Fatal(err)
	}
}

// evaluate runs the drift engine over every series, as its nightly job does.
func (h *harness) evaluate() {
	h.t.Helper()
	w, err := worker.New(h.db, worker.Config{}, slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		h.t.Fatal(err)
	}
	if _, err := w.Evaluate(h.ctx, true); err != nil {
		h.t.Fatal(err)
	}
}

// client is a browser-like HTTP client with a cookie jar that does not
// follow redirects.
type client struct {
	h   *harness
	c   *http.Client
	jar http.CookieJar
}

func (h *harness) client() *client {
	jar, _ := cookiejar.New(nil)
	return &client{h: h, jar: jar, c: &http.Client{Jar: jar, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}}
}

var csrfField = regexp.MustCompile(`name="_csrf" value="([^"]*)"`)

func (c *client) get(path string) (int, string, http.Header) {
	c.h.t.Helper()
	resp, err := c.c.Get(c.h.srv.URL + path)
	if err != nil {
		c.h.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, html.UnescapeString(string(b)), resp.Header
}

// csrf returns the token of the first form on a page.
func (c *client) csrf(path string) string {
	c.h.t.Helper()
	_, body, _ := c.get(path)
	m := csrfField.FindStringSubmatch(body)
	if m == nil {
		c.h.t.Fatalf("no CSRF token in the form on %s", path)
	}
	return m[1]
}

func (c *client) post(path string, form url.Values) (int, string, http.Header) {
	c.h.t.Helper()
	resp, err := c.c.PostForm(c.h.srv.URL+path, form)
	if err != nil {
		c.h.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, html.UnescapeString(string(b)), resp.Header
}

// postWithToken posts form with the CSRF token of the page at from.
func (c *client) postWithToken(from, path string, form url.Values) (int, string, http.Header) {
	c.h.t.Helper()
	form.Set("_csrf", c.csrf(from))
	return c.post(path, form)
}

func (h *harness) signIn(email string) *client {
	h.t.Helper()
	c := h.client()
	code, body, hdr := c.postWithToken("/login", "/login", url.Values{"email": {email}, "password": {testPassword}})
	if code != http.StatusSeeOther {
		h.t.Fatalf("sign-in of %s: %d %s", email, code, body)
	}
	_ = hdr
	return c
}

func must(t testing.TB, cond bool, format string, args ...any) {
	t.Helper()
	if !cond {
		t.Fatalf(format, args...)
	}
}

var _ = fmt.Sprint

// The store as the tests read it: through db's service methods, never SQL.

// checks lists every stored check of every machine, of one kind or all.
func (h *harness) checks(kind halfmark.CheckKind) []halfmark.Check {
	h.t.Helper()
	cs, err := h.db.Checks(h.ctx, halfmark.CheckFilter{Kind: kind, Limit: 5000})
	if err != nil {
		h.t.Fatal(err)
	}
	return cs
}

// series lists every series of every machine.
func (h *harness) series() []halfmark.Series {
	h.t.Helper()
	ms, err := h.db.Machines(h.ctx)
	if err != nil {
		h.t.Fatal(err)
	}
	var out []halfmark.Series
	for _, m := range ms {
		ss, err := h.db.MachineSeries(h.ctx, m.ID)
		if err != nil {
			h.t.Fatal(err)
		}
		out = append(out, ss...)
	}
	return out
}

// seriesID finds a series by edge and quantity (beam 0: any beam).
func (h *harness) seriesID(beamID int64, edge string, q halfmark.Quantity) int64 {
	h.t.Helper()
	for _, s := range h.series() {
		if s.Edge == edge && s.Quantity == q && (beamID == 0 || s.BeamID == beamID) {
			return s.ID
		}
	}
	h.t.Fatalf("no %s %s series on beam %d", edge, q, beamID)
	return 0
}

// baselines lists every baseline version of every series.
func (h *harness) baselines() []halfmark.Baseline {
	h.t.Helper()
	var out []halfmark.Baseline
	for _, s := range h.series() {
		bs, err := h.db.Baselines(h.ctx, s.ID)
		if err != nil {
			h.t.Fatal(err)
		}
		out = append(out, bs...)
	}
	return out
}

// raw lists the raw records of every stored check, with their content.
func (h *harness) raw() []halfmark.RawData {
	h.t.Helper()
	var out []halfmark.RawData
	for _, c := range h.checks("") {
		rs, err := h.db.RawForCheck(h.ctx, c.ID)
		if err != nil {
			h.t.Fatal(err)
		}
		for _, r := range rs {
			full, err := h.db.Raw(h.ctx, r.ID)
			if err != nil {
				h.t.Fatal(err)
			}
			out = append(out, full)
		}
	}
	return out
}
