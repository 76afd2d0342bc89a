// Package web serves Halfmark's dashboard on the same echo server as the
// JSON API: server-rendered html/template pages, embedded templates and
// static files, charts drawn in Go with gonum/plot (inline SVG on pages,
// PNG in the monthly PDF report), and no inline script, so the pages work
// under a Content-Security-Policy without 'unsafe-inline'.
//
// Sign-in and sessions. Users sign in with an e-mail and a password
// (argon2id hashes; see db/users.go). Failures slow down further tries per
// account and address and per address (signInGuard), never per account
// alone, and every refusal reads the same. Sessions are kept on the server, in PostgreSQL (table
// sessions): the browser holds only a random 256-bit token in the HttpOnly,
// SameSite=Lax cookie "hm_session" (Secure when the request came over TLS,
// directly or through a trusted proxy), and the store keeps the token's SHA-256.
// A session ends after Deps.SessionIdle without a request (default 12 h),
// after Deps.SessionMaxAge in any case (default 7 days), or at sign-out,
// which deletes the row — so sign-out and revocation take effect at once,
// unlike a signed cookie.
//
// Forms. Every state-changing request must carry the form's _csrf token,
// which is bound to the browser's session (csrf.go); a request without the
// token of its own session is refused with 403. Bodies are limited before
// any form is read (api.LimitBody); upload forms get a larger limit only
// after the session and role checks.
//
// Every page's footer carries the safety caution: results support, never
// replace, a qualified medical physicist; tolerances are set locally.
package web

import (
	"context"
	"errors"
	"log/slog"
	"net"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// ServiceEventLister lists a machine's service events, newest first. The
// PostgreSQL store (db.DB) implements it; Deps.Events may be nil.
type ServiceEventLister interface {
	ServiceEvents(ctx context.Context, machineID int64) ([]halfmark.ServiceEvent, error)
}

// Deps are the services the dashboard uses. Machines, Checks, Series,
// Users, Sessions, Raw, Audit and Tolerances are required; Status, Alerts,
// Events and SignOffs may be nil until they exist (the pages then say the
// part is not available).
type Deps struct {
	Machines   halfmark.MachineService
	Checks     halfmark.CheckService
	Series     halfmark.SeriesService
	Users      halfmark.UserService
	Sessions   halfmark.SessionService
	SignOffs   halfmark.SignOffService
	Raw        halfmark.RawService
	Status     halfmark.StatusService
	Alerts     halfmark.AlertService
	Events     ServiceEventLister
	Audit      halfmark.AuditService
	Import     Importer // may be nil: the import page says so
	Export     Exporter // may be nil: the download says so
	Tolerances halfmark.ToleranceBook
	// Findings and Evaluations read what the drift engine decided (nil:
	// the pages say it is not available).
	Findings    halfmark.FindingService
	Evaluations halfmark.EvaluationService
	Verdicts    halfmark.VerdictService // stored evaluations; optional: without it no verdict is shown
	Reports     halfmark.ReportService
	// Instruction is shown beside a Level 2 or 3 morning verdict (empty:
	// DefaultInstruction).
	Instruction string
	Log         *slog.Logger
	Now         func() time.Time

	// SessionIdle ends a session after this long without a request
	// (default 12 h); SessionMaxAge ends it in any case (default 7 days).
	SessionIdle   time.Duration
	SessionMaxAge time.Duration

	// Penumbra reads penumbra data for the beam page (nil: the page says
	// the model is not available).
	Penumbra halfmark.PenumbraService
	// TrustedProxies are the reverse proxies whose X-Forwarded-Proto is
	// believed (Secure cookies); the client address comes from the echo
	// server's IPExtractor.
	TrustedProxies []*net.IPNet
}

// Register adds the dashboard's routes, with their security headers,
// session and CSRF middleware, to e. It fails when a required service is
// missing or a template does not parse.
func Register(e *echo.Echo, d Deps) error {
	if d.Machines == nil || d.Checks == nil || d.Series == nil || d.Users == nil || d.Sessions == nil ||
		d.Raw == nil || d.Audit == nil || d.Tolerances == nil {
		return errors.New("web: Deps needs Machines, Checks, Series, Users, Sessions, Raw, Audit and Tolerances")
	}
	if d.Log == nil {
		d.Log = slog.Default()
	}
	if d.Now == nil {
		d.Now = time.Now
	}
	if d.SessionIdle <= 0 {
		d.SessionIdle = 12 * time.Hour
	}
	if d.SessionMaxAge <= 0 {
		d.SessionMaxAge = 7 * 24 * time.Hour
	}
	tpl, err := parseTemplates()
	if err != nil {
		return err
	}
	s := &server{d: d, tpl: tpl}
	return s.routes(e)
}

type server struct {
	d        Deps
	tpl      templates
	sessions sessionCache
	status   statusCache
	guard    signInGuard
}
