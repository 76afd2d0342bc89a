package web

import (
	"io/fs"
	"net/http"

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
	g.POST("/login", s.login)
	g.POST("/logout", s.logout)

	ther, phys := s.need(halfmark.RoleTherapist), s.need(halfmark.RolePhysicist)
	g.GET("/", s.front, ther)
	g.GET("/machines/:id", s.machine, ther)
	g.GET("/machines/:id/report", s.report, ther)
	g.POST("/machines/:id/report/sign", s.signReport, phys)
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
