package web

import (
	"io/fs"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/labstack/echo/v4/middleware"

	"halfmark"
)

// routes lists every dashboard route and its middleware in one place. The
// server-wide middleware (security headers, body limit, client address) and
// the API routes are in api/routes.go; /metrics has its own address.
//
// Each dashboard route runs: headers → csrf → session → [role] → handler.
// Upload routes run session → role → larger body limit → csrf, so that no
// form is parsed for a caller who is not signed in.
func (s *server) routes(e *echo.Echo) error {
	static, err := fs.Sub(assets, "static")
	if err != nil {
		return err
	}
	e.Use(s.apiActor)

	common := []echo.MiddlewareFunc{s.headers, s.csrf, s.session}
	g := &router{e: e, common: common}
	// Static files need no session or CSRF cookie: only the headers.
	e.GET("/static/*", echo.WrapHandler(http.StripPrefix("/static/", http.FileServer(http.FS(static)))), s.headers)
	g.GET("/login", s.loginPage)
	// The limit comes before every other check, so refused attempts count too.
	g.e.Add(http.MethodPost, "/login", s.login, append([]echo.MiddlewareFunc{s.signInLimit()}, common...)...)
	g.POST("/logout", s.logout)

	ther, phys := s.need(halfmark.RoleTherapist), s.need(halfmark.RolePhysicist)
	g.GET("/", s.front, ther)
	g.GET("/machines/:id", s.machine, ther)
	g.GET("/machines/:id/report", s.report, ther)
	g.GET("/machines/:id/beams/:beam", s.beam, ther)
	g.POST("/machines/:id/service", s.componentService, phys)
	g.POST("/machines/:id/findings/acknowledge", s.acknowledgeAll, phys)
	g.POST("/machines/:id/report/sign", s.signReport, phys) // the old address; the month comes in the form
	g.GET("/machines/:id/reports/:month", s.reportPage, ther)
	g.GET("/machines/:id/reports/:month/draft.pdf", s.reportDraft, ther)
	g.GET("/machines/:id/reports/:month/signed.pdf", s.reportSigned, ther)
	g.POST("/machines/:id/reports/:month/sign", s.signReport, phys)
	g.GET("/findings", s.findings, ther)
	g.GET("/findings/:id", s.finding, ther)
	g.POST("/findings/:id/acknowledge", s.findingAcknowledge, phys)
	g.POST("/findings/:id/resolve", s.findingResolve, phys)
	g.GET("/alerts", s.alertsPage, ther)
	g.GET("/alerts/:id", s.alertPage, ther)
	g.GET("/series/:id", s.series, ther)
	g.POST("/series/:id/baseline", s.setBaseline, phys)
	g.POST("/series/:id/period", s.newPeriod, phys)
	g.POST("/alerts/:id/acknowledge", s.acknowledge, phys)
	g.POST("/alerts/:id/resolve", s.resolve, phys)
	g.GET("/entry", s.entryPage, ther)
	g.POST("/entry", s.entrySave, ther)
	g.GET("/monthly", s.monthly, ther)
	upload := []echo.MiddlewareFunc{s.headers, s.session, ther, raiseBodyLimit(maxUploadFormBytes), s.csrf}
	e.POST("/monthly/analyze", s.monthlyAnalyze, upload...)
	e.POST("/monthly/save", s.monthlySave, upload...)
	g.GET("/raw/:id", s.rawDownload, ther)
	g.GET("/import", s.importPage, ther)
	g.POST("/import/preview", s.importPreview, phys)
	g.POST("/import/store", s.importStore, phys)
	g.GET("/export", s.exportDownload, ther)
	return nil
}

// maxUploadFormBytes bounds an upload form: the file (maxUploadBytes), or
// on save its base64 copy (4/3 of it), plus the other fields.
const maxUploadFormBytes = maxUploadBytes*4/3 + 1<<20

// raiseBodyLimit lets an upload route read up to n bytes of body (the
// server-wide limit, api.LimitBody, stays for every other route).
func raiseBodyLimit(n int64) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			if b, ok := c.Request().Body.(interface{ RaiseLimit(int64) }); ok {
				b.RaiseLimit(n)
			}
			if c.Request().ContentLength > n {
				return echo.NewHTTPError(http.StatusRequestEntityTooLarge)
			}
			return next(c)
		}
	}
}

// router adds routes with the dashboard's middleware in front of each, so
// that the API's routes on the same server are untouched.
type router struct {
	e      *echo.Echo
	common []echo.MiddlewareFunc
}

func (r *router) add(method, path string, h echo.HandlerFunc, m []echo.MiddlewareFunc) {
	all := make([]echo.MiddlewareFunc, 0, len(r.common)+len(m))
	r.e.Add(method, path, h, append(append(all, r.common...), m...)...)
}

func (r *router) GET(path string, h echo.HandlerFunc, m ...echo.MiddlewareFunc) {
	r.add(http.MethodGet, path, h, m)
}
func (r *router) POST(path string, h echo.HandlerFunc, m ...echo.MiddlewareFunc) {
	r.add(http.MethodPost, path, h, m)
}

// Sign-in attempts per client address: a burst of signInBurst, then one a
// second. With the per-account lock-out (halfmark.MaxFailedSignIns) this
// bounds password guessing across many accounts from one address.
const signInBurst = 30

func (s *server) signInLimit() echo.MiddlewareFunc {
	store := middleware.NewRateLimiterMemoryStoreWithConfig(middleware.RateLimiterMemoryStoreConfig{
		Rate: 1, Burst: signInBurst, ExpiresIn: 10 * time.Minute})
	return middleware.RateLimiterWithConfig(middleware.RateLimiterConfig{
		Store:               store,
		IdentifierExtractor: func(c echo.Context) (string, error) { return c.RealIP(), nil },
		DenyHandler: func(c echo.Context, _ string, _ error) error {
			return s.fail(c, http.StatusTooManyRequests, "Too many sign-in attempts from this address. Wait a minute, then try again.")
		},
		ErrorHandler: func(c echo.Context, _ error) error {
			return s.fail(c, http.StatusForbidden, "The client address could not be determined.")
		},
	})
}
