package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/cookiejar"
	"net/http/httptest"
	"net/url"
	"regexp"
	"strings"
	"testing"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/db"
	"halfmark/worker"
)

// access is one caller of the matrix.
type access struct {
	name    string
	role    halfmark.Role // "" for none
	token   string        // API bearer token
	session string        // dashboard session cookie
}

// The access-control matrix: every route of the served handler (the API and
// the dashboard, enumerated from the router itself so a new route cannot be
// missed) against no credentials, an unknown token, a revoked token, an
// expired session, and each role by token and by session. A caller below
// the route's role is refused (401/403, or for dashboard pages a redirect
// to the sign-in page); one at or above it is never refused and never gets
// a 5xx.
func TestAccessControlMatrix(t *testing.T) {
	ctx := context.Background()
	d, h, srv := servedHandler(t)

	a := halfmark.CLIActor("matrix")
	m := halfmark.Machine{Name: "Linac Aster", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMorning, MeasuredAt: d.Now().Add(-3600e9),
		Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50}}}
	sc, _, err := d.RecordCheck(ctx, a, &c)
	if err != nil {
		t.Fatal(err)
	}
	seriesID := sc.Edges[0].SeriesID

	callers := []access{{name: "no credentials"}, {name: "unknown token", token: "hm_unknown"}}
	for _, r := range []halfmark.Role{halfmark.RoleTherapist, halfmark.RolePhysicist, halfmark.RoleAdmin} {
		_, tok, err := d.CreateToken(ctx, a, "matrix-"+string(r), r)
		if err != nil {
			t.Fatal(err)
		}
		u, err := d.CreateUser(ctx, a, string(r)+"@matrix.example", r, "correct horse battery")
		if err != nil {
			t.Fatal(err)
		}
		sess, err := d.CreateSession(ctx, u.ID)
		if err != nil {
			t.Fatal(err)
		}
		callers = append(callers, access{name: string(r) + " token", role: r, token: tok},
			access{name: string(r) + " session", role: r, session: sess})
	}
	revoked, rtok, err := d.CreateToken(ctx, a, "matrix-revoked", halfmark.RoleAdmin)
	if err != nil {
		t.Fatal(err)
	}
	if err := d.RevokeToken(ctx, a, revoked.ID); err != nil {
		t.Fatal(err)
	}
	callers = append(callers, access{name: "revoked admin token", token: rtok})
	u, err := d.CreateUser(ctx, a, "expired@matrix.example", halfmark.RoleAdmin, "correct horse battery")
	if err != nil {
		t.Fatal(err)
	}
	old, err := d.CreateSession(ctx, u.ID)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := d.Pool.Exec(ctx, `UPDATE sessions SET last_seen_at = now() - interval '3 days', created_at = now() - interval '30 days' WHERE user_id = $1`, u.ID); err != nil {
		t.Fatal(err)
	}
	callers = append(callers, access{name: "expired admin session", session: old})

	// need: the least role of each route; "" for public routes. A route
	// missing here fails the test.
	need := map[string]halfmark.Role{
		"GET /healthz": "", "GET /readyz": "", "GET /api/v1/openapi.yaml": "", "GET /static/*": "",
		"GET /login": "", "POST /login": "", "POST /logout": "",
		"GET /api/v1/machines": "therapist", "POST /api/v1/machines": "admin", "GET /api/v1/machines/:id": "therapist",
		"GET /api/v1/machines/:id/beams": "therapist", "POST /api/v1/machines/:id/beams": "admin",
		"GET /api/v1/machines/:id/series": "therapist", "POST /api/v1/checks": "therapist", "POST /api/v1/checks/batch": "therapist",
		"GET /api/v1/checks": "therapist", "GET /api/v1/checks/:id": "therapist", "POST /api/v1/checks/raw": "therapist",
		"POST /api/v1/checks/:id/recompute": "physicist", "GET /api/v1/checks/:id/raw": "therapist", "GET /api/v1/raw/:id": "therapist",
		"GET /api/v1/series/:id": "therapist", "GET /api/v1/series/:id/points": "therapist", "GET /api/v1/series/:id/baselines": "therapist",
		"POST /api/v1/series/:id/baselines": "physicist", "POST /api/v1/analyze/profile": "therapist", "POST /api/v1/analyze/image": "therapist",
		"POST /api/v1/analyze/picket": "therapist", "GET /api/v1/tokens": "admin", "POST /api/v1/tokens": "admin",
		"DELETE /api/v1/tokens/:id": "admin", "GET /api/v1/audit": "physicist", "GET /api/v1/status": "therapist",
		"GET /api/v1/alerts": "therapist", "GET /api/v1/alerts/:id": "therapist", "POST /api/v1/alerts/:id/acknowledge": "physicist",
		"GET /api/v1/findings": "therapist", "GET /api/v1/findings/:id": "therapist", "POST /api/v1/findings/:id/acknowledge": "physicist",
		"POST /api/v1/findings/:id/resolve": "physicist",
		"POST /api/v1/alerts/:id/resolve":   "physicist", "GET /api/v1/series/:id/chart": "therapist",
		"GET /api/v1/machines/:id/service-events": "therapist", "POST /api/v1/machines/:id/service-events": "physicist",
		"GET /": "therapist", "GET /machines/:id": "therapist", "GET /machines/:id/report": "therapist",
		"POST /machines/:id/report/sign": "physicist", "GET /series/:id": "therapist", "POST /series/:id/baseline": "physicist",
		"POST /series/:id/period": "physicist", "POST /alerts/:id/acknowledge": "physicist", "POST /alerts/:id/resolve": "physicist",
		"GET /entry": "therapist", "POST /entry": "therapist", "GET /monthly": "therapist", "POST /monthly/analyze": "therapist",
		"POST /monthly/save": "therapist", "GET /raw/:id": "therapist",
		"GET /api/v1/machines/:id/reports/:month": "therapist", "GET /api/v1/machines/:id/reports/:month/signed": "therapist",
		"POST /api/v1/machines/:id/reports/:month/sign": "physicist", "GET /machines/:id/reports/:month": "therapist",
		"GET /machines/:id/reports/:month/draft.pdf": "therapist", "GET /machines/:id/reports/:month/signed.pdf": "therapist",
		"POST /machines/:id/reports/:month/sign": "physicist", "GET /findings": "therapist", "GET /findings/:id": "therapist",
		"POST /findings/:id/acknowledge": "physicist", "POST /findings/:id/resolve": "physicist",
		"GET /alerts": "therapist", "GET /alerts/:id": "therapist",
		"PATCH /api/v1/machines/:id": "admin", "GET /api/v1/beams/:id/penumbra-model": "therapist",
		"POST /api/v1/beams/:id/penumbra-model/predict": "therapist", "GET /machines/:id/beams/:beam": "therapist",
		"POST /machines/:id/service": "physicist", "POST /machines/:id/findings/acknowledge": "physicist",
		"GET /import": "therapist", "POST /import/preview": "physicist", "POST /import/store": "physicist", "GET /export": "therapist",
	}
	ids := strings.NewReplacer(":id", "", "*", "halfmark.css")
	pathFor := func(route string) string {
		route = strings.Replace(route, ":month", "2026-11", 1)
		switch {
		case strings.HasPrefix(route, "/api/v1/machines/:id"), strings.HasPrefix(route, "/machines/:id"):
			return strings.Replace(route, ":id", fmt.Sprint(m.ID), 1)
		case strings.Contains(route, "/series/:id"):
			return strings.Replace(route, ":id", fmt.Sprint(seriesID), 1)
		case strings.Contains(route, "/checks/:id"):
			return strings.Replace(route, ":id", sc.ID, 1)
		case strings.Contains(route, "/tokens/:id"):
			return strings.Replace(route, ":id", "999999", 1) // never an existing token: the matrix must not revoke its own
		}
		return ids.Replace(strings.Replace(route, ":id", "1", 1))
	}
	var routes []*echo.Route
	if e, ok := h.(*echo.Echo); ok {
		routes = e.Routes()
	} else {
		t.Fatal("the handler is not the echo server")
	}
	checked := 0
	for _, r := range routes {
		if r.Method == echo.RouteNotFound || r.Path == "" {
			continue
		}
		key := r.Method + " " + r.Path
		want, ok := need[key]
		if !ok {
			t.Errorf("route %s is not in the access matrix: add its role", key)
			continue
		}
		web := !strings.HasPrefix(r.Path, "/api/") && r.Path != "/healthz" && r.Path != "/readyz" && r.Path != "/metrics"
		for _, cl := range callers {
			if want == "" && cl.name != "no credentials" {
				continue
			}
			st, loc := call(t, srv.URL, r.Method, pathFor(r.Path), cl, web)
			// A session reads the API (GET) but never writes it; a token is
			// no credential for a dashboard page.
			allowed := cl.role != "" && cl.role.Allows(want)
			if web && cl.session == "" && want != "" {
				allowed = false
			}
			if !web && cl.session != "" && r.Method != http.MethodGet {
				allowed = false
			}
			if want == "" {
				allowed = true
			}
			refused := st == 401 || st == 403 || (st == 303 && strings.HasPrefix(loc, "/login"))
			switch {
			case st >= 500:
				t.Errorf("%s as %s: %d", key, cl.name, st)
			case want == "":
				// Public: sign-in refuses an empty form, sign-out redirects.
			case allowed && refused && !(web && r.Method == http.MethodPost && st == 403 && cl.session == ""):
				t.Errorf("%s as %s: refused with %d, want allowed", key, cl.name, st)
			case !allowed && !refused:
				t.Errorf("%s as %s: %d (location %q), want refused", key, cl.name, st, loc)
			}
			checked++
		}
	}
	t.Logf("%d routes, %d route × caller requests", len(routes), checked)
}

var csrfInForm = regexp.MustCompile(`name="_csrf" value="([^"]*)"`)

// call sends one request as the caller. Dashboard POSTs carry a valid CSRF
// token (fetched with the caller's own cookies) so that the role decides.
func call(t *testing.T, base, method, path string, cl access, web bool) (int, string) {
	t.Helper()
	jar, _ := cookiejar.New(nil)
	u, _ := url.Parse(base)
	if cl.session != "" {
		jar.SetCookies(u, []*http.Cookie{{Name: "hm_session", Value: cl.session, Path: "/"}})
	}
	client := &http.Client{Jar: jar, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	form := url.Values{}
	if web && method == http.MethodPost {
		// The token is bound to the session: take it from a form the
		// caller's own cookies get (the sign-out form on /, or /login).
		for _, page := range []string{"/", "/login"} {
			resp, err := client.Get(base + page)
			if err != nil {
				continue
			}
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if m := csrfInForm.FindSubmatch(b); m != nil {
				form.Set("_csrf", string(m[1]))
				break
			}
		}
	}
	var body io.Reader
	ctype := "application/json"
	if web {
		body, ctype = strings.NewReader(form.Encode()), "application/x-www-form-urlencoded"
	} else if method != http.MethodGet && method != http.MethodDelete {
		body = strings.NewReader("{}")
	}
	req, _ := http.NewRequest(method, base+path, body)
	if body != nil {
		req.Header.Set("Content-Type", ctype)
	}
	if cl.token != "" {
		req.Header.Set("Authorization", "Bearer "+cl.token)
	}
	resp, err := client.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	io.Copy(io.Discard, resp.Body)
	resp.Body.Close()
	return resp.StatusCode, resp.Header.Get("Location")
}

// servedHandler starts the handler `serve` builds (API, dashboard) on a
// throw-away database, on a loopback port.
func servedHandler(t *testing.T) (*db.DB, http.Handler, *httptest.Server) {
	t.Helper()
	_, d := migratedStore(t)
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	wk, err := worker.New(d, worker.Config{}, log)
	if err != nil {
		t.Fatal(err)
	}
	h, err := newHandler(d, wk, log, nil, httpConfig{})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close)
	return d, h, srv
}

// Sign-in attempts from one address are limited: after the burst the
// dashboard answers 429 with a message, whatever the account.
func TestSignInRateLimit(t *testing.T) {
	_, _, srv := servedHandler(t)
	limited := 0
	for i := 0; i < 60; i++ {
		form := url.Values{"email": {fmt.Sprintf("nobody%d@example.org", i)}, "password": {"wrong password"}}
		resp, err := http.PostForm(srv.URL+"/login", form)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode == http.StatusTooManyRequests {
			limited++
			if !strings.Contains(string(b), "Too many sign-in attempts") {
				t.Fatalf("429 without the message: %.200s", b)
			}
		}
	}
	if limited == 0 {
		t.Fatal("60 sign-in attempts in a row were never limited")
	}
}

// Rotating X-Forwarded-For does not get round the sign-in limit: with no
// trusted proxy configured, the client address is the socket's peer (the
// outside probe bypassed the limit this way).
func TestSignInRateLimitIgnoresForwardedFor(t *testing.T) {
	_, _, srv := servedHandler(t)
	limited := 0
	for i := 0; i < 60; i++ {
		form := url.Values{"email": {fmt.Sprintf("nobody%d@example.org", i)}, "password": {"wrong password"}}
		req, _ := http.NewRequest(http.MethodPost, srv.URL+"/login", strings.NewReader(form.Encode()))
		req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
		req.Header.Set("X-Forwarded-For", fmt.Sprintf("198.51.100.%d", i+1))
		req.Header.Set("X-Real-IP", fmt.Sprintf("203.0.113.%d", i+1))
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		if resp.StatusCode == http.StatusTooManyRequests {
			limited++
		}
	}
	if limited == 0 {
		t.Fatal("60 sign-in attempts with a new X-Forwarded-For each were never limited")
	}
}

// The served handler: security headers on API answers, problems and 404s
// of both halves; /metrics is not on the service address; a large body
// without credentials is refused before any form is read.
func TestServedHandlerHeadersAndLimits(t *testing.T) {
	_, _, srv := servedHandler(t)
	for _, p := range []string{"/api/v1/machines", "/api/v1/no-such", "/no-such", "/healthz", "/login", "/metrics"} {
		resp, err := http.Get(srv.URL + p)
		if err != nil {
			t.Fatal(err)
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		h := resp.Header
		if !strings.Contains(h.Get("Content-Security-Policy"), "frame-ancestors 'none'") || h.Get("X-Content-Type-Options") != "nosniff" || h.Get("Referrer-Policy") == "" {
			t.Errorf("%s (%d): headers %v", p, resp.StatusCode, h)
		}
		if p == "/metrics" && resp.StatusCode != http.StatusNotFound {
			t.Errorf("/metrics on the service address: %d", resp.StatusCode)
		}
	}
	for _, p := range []string{"/logout", "/entry"} {
		req, _ := http.NewRequest(http.MethodPost, srv.URL+p, strings.NewReader(strings.Repeat("a", 2<<20)))
		req.Header.Set("Content-Type", "multipart/form-data; boundary=x")
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			continue
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusRequestEntityTooLarge {
			t.Errorf("2 MiB to %s without credentials: %d; want 413", p, resp.StatusCode)
		}
	}
}
