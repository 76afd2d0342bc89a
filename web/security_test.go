package web_test

import (
	"fmt"
	"halfmark"
	"io"
	"net/http"
	"net/url"
	"strings"
	"testing"
)

// Redirect targets stay on this site after decoding: tab, newline, a
// backslash or a leading "//" (browsers drop tabs and newlines and read "\"
// as "/" — WHATWG URL Standard, basic URL parser) send the user to "/".
// Found by the outside probe: next=%2F%09%2Fevil.example gave Location
// "/\t/evil.example". The alert form's back= goes through the same
// localPath (redirect_test.go).
func TestRedirectTargetsStayOnSite(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	bad := []string{"/\t/evil.example", "/\n/evil.example", "/\\evil.example", "\\\\evil.example", "//evil.example",
		"/%2F/evil.example", "/%09/evil.example", "/%5Cevil.example", "https://evil.example", "/%252F%252Fevil.example",
		"/\u0085/evil.example", " /x"}
	for _, next := range bad {
		c := h.client()
		_, _, hdr := c.postWithToken("/login", "/login", url.Values{"email": {"therapist@example.org"}, "password": {testPassword}, "next": {next}})
		must(t, hdr.Get("Location") == "/", "next=%q redirected to %q", next, hdr.Get("Location"))
	}
	c := h.client()
	_, _, hdr := c.postWithToken("/login", "/login", url.Values{"email": {"therapist@example.org"}, "password": {testPassword}, "next": {"/series/3?from=2026-01"}})
	must(t, hdr.Get("Location") == "/series/3?from=2026-01", "a same-site path was changed to %q", hdr.Get("Location"))

}

// The CSRF token is bound to the session: a token taken from one signed-in
// browser is refused in another's, and signing in changes the token.
func TestCSRFTokenBoundToSession(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, bids := h.machine("Tern", 6)
	a := h.signIn("physicist@example.org")
	b := h.signIn("therapist@example.org")
	tokA := a.csrf("/entry")
	tokB := b.csrf("/entry")
	must(t, tokA != tokB, "two sessions share a CSRF token")
	entry := url.Values{"beam": {fmt.Sprintf("%d:%d", mid, bids[0])}, "x1": {"50"}, "x2": {"50"}, "y1": {"50"}, "y2": {"50"}, "field_x": {"10"}, "field_y": {"10"}, "_csrf": {tokA}}
	code, _, _ := b.post("/entry", entry)
	must(t, code == http.StatusForbidden, "another session's token: %d; want 403", code)
	must(t, len(h.checks("")) == 0, "a check was stored with another session's token")
	anon := h.client()
	pre := anon.csrf("/login")
	signed := h.signIn("admin@example.org")
	must(t, signed.csrf("/entry") != pre, "the token did not change at sign-in")
}

// Security headers on every response: dashboard pages, API answers, API
// problems, 404s of either, and static files (OWASP Secure Headers Project;
// common practice). /metrics is not served on the service address.
func TestSecurityHeadersEverywhere(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	for _, p := range []string{"/login", "/healthz", "/api/v1/machines", "/api/v1/nope", "/nope", "/static/halfmark.css", "/metrics"} {
		resp, err := http.Get(h.srv.URL + p)
		must(t, err == nil, "%v", err)
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		hd := resp.Header
		must(t, strings.Contains(hd.Get("Content-Security-Policy"), "frame-ancestors 'none'"), "%s (%d): CSP %q", p, resp.StatusCode, hd.Get("Content-Security-Policy"))
		must(t, hd.Get("X-Content-Type-Options") == "nosniff", "%s: no nosniff", p)
		must(t, hd.Get("Referrer-Policy") != "", "%s: no Referrer-Policy", p)
		if p == "/metrics" {
			must(t, resp.StatusCode == http.StatusNotFound, "/metrics on the service address: %d; want 404", resp.StatusCode)
		}
	}
}

// A large body without credentials is refused before any form is read: a
// declared 300 MiB to /logout, /entry or /monthly/analyze answers 413 (or
// 401 for the upload route, which checks the session first) at once, and
// a body that hides its length stops being read at the server-wide limit.
func TestBodyLimitBeforeFormParsing(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	for _, p := range []string{"/logout", "/entry", "/login", "/monthly/analyze", "/api/v1/checks"} {
		req, _ := http.NewRequest(http.MethodPost, h.srv.URL+p, io.LimitReader(zeros{}, 300<<20))
		req.ContentLength = 300 << 20
		req.Header.Set("Content-Type", "multipart/form-data; boundary=x")
		resp, err := http.DefaultClient.Do(req)
		if err != nil { // the server may close the connection while the client still sends
			continue
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		must(t, resp.StatusCode == http.StatusRequestEntityTooLarge || resp.StatusCode == http.StatusUnauthorized,
			"%s with 300 MiB: %d; want 413 (or 401 before an upload)", p, resp.StatusCode)
	}
	// Chunked (no declared length): read up to the limit, then refused.
	req, _ := http.NewRequest(http.MethodPost, h.srv.URL+"/logout", io.MultiReader(strings.NewReader("--x\r\nContent-Disposition: form-data; name=\"f\"; filename=\"a\"\r\n\r\n"), io.LimitReader(zeros{}, 50<<20)))
	req.Header.Set("Content-Type", "multipart/form-data; boundary=x")
	resp, err := http.DefaultClient.Do(req)
	if err == nil {
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		must(t, resp.StatusCode == http.StatusForbidden || resp.StatusCode == http.StatusRequestEntityTooLarge,
			"chunked 50 MiB to /logout: %d", resp.StatusCode)
	}
}

type zeros struct{}

func (zeros) Read(p []byte) (int, error) {
	for i := range p {
		p[i] = 'a'
	}
	return len(p), nil
}

// The probe's dashboard cases: a NUL byte in the sign-in e-mail is an
// ordinary refused sign-in (it reached PostgreSQL and gave 500); a report
// sign-off with a NUL in its comment, or for 9999-12 or 0001-01, is refused
// with 422 and writes no audit row.
func TestDashboardFreeTextAndMonthsRefused(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, _ := h.machine("Tern", 6)
	c := h.client()
	code, _, _ := c.postWithToken("/login", "/login", url.Values{"email": {"therapist\x00@example.org"}, "password": {testPassword}})
	must(t, code == http.StatusUnauthorized, "NUL in the sign-in e-mail: %d; want 401", code)

	p := h.signIn("physicist@example.org")
	signs := func() int {
		n := 0
		for _, m := range []string{"2026-01", "9999-12", "0001-01"} {
			es, err := h.db.Audit(h.ctx, "report", halfmark.ReportEntityID(mid, m), 10)
			must(t, err == nil, "%v", err)
			n += len(es)
		}
		return n
	}
	before := signs()
	for _, f := range []url.Values{
		{"month": {"2026-01"}, "comment": {"checked\x00"}},
		{"month": {"9999-12"}, "comment": {"checked"}},
		{"month": {"0001-01"}, "comment": {"checked"}},
	} {
		code, _, _ := p.postWithToken("/", fmt.Sprintf("/machines/%d/reports/%s/sign", mid, f.Get("month")), url.Values{"reason": f["comment"]})
		must(t, code == http.StatusUnprocessableEntity || code == http.StatusBadRequest || code == http.StatusNotFound, "sign-off %v: %d; want a refusal", f, code)
	}
	must(t, signs() == before, "a refused sign-off wrote an audit row")
	code, _, _ = p.postWithToken("/", fmt.Sprintf("/machines/%d/reports/2026-01/sign", mid), url.Values{"reason": {"checked"}})
	must(t, code == http.StatusSeeOther || code == http.StatusOK, "a good sign-off: %d", code)
}
