// Package api serves Halfmark's JSON API under /api/v1 with echo v4:
// bearer-token authentication, role checks, RFC 9457 problem bodies and
// the OpenAPI document.
package api

import (
	"log/slog"
	"net"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// Services are what the API needs; db.DB implements all of them.
type Services struct {
	Machines    halfmark.MachineService
	Checks      halfmark.CheckService
	Series      halfmark.SeriesService
	Auth        halfmark.AuthService
	Audit       halfmark.AuditService
	Pinger      halfmark.Pinger
	Alerts      halfmark.AlertService      // alert list and lifecycle
	Status      halfmark.StatusService     // the front page
	Events      EventService               // service events
	Findings    halfmark.FindingService    // findings and their lifecycle (nil: 503)
	Evaluations halfmark.EvaluationService // the engine's stored judgements (nil: charts answer 503)
	Raw         halfmark.RawService        // raw data behind checks
	// Reports keeps signed monthly reports; ReportRenderer renders drafts
	// (nil: the report routes answer 503).
	Reports        halfmark.ReportService
	ReportRenderer halfmark.ReportRenderer
	Metrics        *Metrics // nil: requests are not counted
	Log            *slog.Logger
	Now            func() time.Time

	Penumbra halfmark.PenumbraService // penumbra model data (nil: its routes answer 503)

	// RoleWarning, when not empty, says the service connects as a database
	// role the append-only triggers do not bind; /readyz repeats it.
	RoleWarning string
	// TrustedProxies are the reverse proxies whose X-Forwarded-For and
	// X-Forwarded-Proto are believed; empty: the socket's peer is the client.
	TrustedProxies []*net.IPNet
}

// New returns an echo server with the error handler and the API routes.
// Other packages (the dashboard) add their routes to the same server.
func New(s Services) *echo.Echo {
	if s.Log == nil {
		s.Log = slog.Default()
	}
	if s.Now == nil {
		s.Now = time.Now
	}
	e := echo.New()
	e.HideBanner = true
	e.HidePort = true
	e.HTTPErrorHandler = ErrorHandler(s.Log)
	e.IPExtractor = ClientIP(s.TrustedProxies)
	h := &handlers{s: s}
	h.routes(e)
	return e
}

type handlers struct{ s Services }
