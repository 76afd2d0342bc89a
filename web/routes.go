package web

import (
	"io/fs"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/labstack/echo/v4/middleware"

	"halfmark"
)

// routes lists every dashboard route in one place.
func (s *server) routes(e *echo.Echo) error {
	cfg := middleware.CSRFConfig{
		TokenLookup:    "form:_csrf",
		CookieName:     "_csrf",
		CookiePath:     "/",
		CookieHTTPOnly: true,
		CookieSameSite: http.SameSiteStrictMode,
		ErrorHandler: func(err error, c echo.Context) error {
			return s.fail(c, http.StatusForbidden, "This form has expired or did not come from this site (no valid CSRF token). Reload the page and submit it again.")
		},
	}
	csrfPlain := middleware.CSRFWithConfig(cfg)
	cfg.CookieSecure = true
	csrfTLS := middleware.CSRFWithConfig(cfg)
	// The CSRF cookie is Secure when the request came over TLS.
	csrf := func(next echo.HandlerFunc) echo.HandlerFunc {
		plain, tls := csrfPlain(next), csrfTLS(next)
		return func(c echo.Context) error {
			if secure(c) {
				return tls(c)
			}
			return plain(c)
		}
	}
	static, err := fs.Sub(assets, "static")
	if err != nil {
		return err
	}
	e.Use(s.apiActor)

	common := []echo.MiddlewareFunc{s.headers, csrf, s.session}
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
	g.POST("/machines/:id/report/sign", s.signReport, phys)
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
	g.POST("/monthly/analyze", s.monthlyAnalyze, ther)
	g.POST("/monthly/save", s.monthlySave, ther)
	g.GET("/raw/:id", s.rawDownload, ther)
	return nil
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
