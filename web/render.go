package web

import (
	"bytes"
	"embed"
	"fmt"
	"html/template"
	"math"
	"net/http"
	"strings"
	"sync"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/labstack/echo/v4/middleware"

	"halfmark"
)

//go:embed templates/*.html static
var assets embed.FS

// templates maps a page name to its template (the layout plus the page).
type templates map[string]*template.Template

var pageNames = []string{"login", "error", "front", "machine", "series", "entry", "monthly", "beam", "import", "report", "findings", "finding"}

func parseTemplates() (templates, error) {
	t := templates{}
	for _, name := range pageNames {
		p, err := template.New("").Funcs(funcs).ParseFS(assets, "templates/layout.html", "templates/"+name+".html")
		if err != nil {
			return nil, fmt.Errorf("web: template %s: %w", name, err)
		}
		t[name] = p
	}
	return t, nil
}

// page is what every template gets; Data is the page's own part.
type page struct {
	Title           string
	User            *halfmark.User
	CSRF            string
	Refresh         int // seconds; 0: no automatic refresh
	ShippedExample  bool
	ToleranceSource string
	Year            int
	Data            any
}

func (s *server) page(c echo.Context, title string, data any) page {
	tok, _ := c.Get(middleware.DefaultCSRFConfig.ContextKey).(string)
	return page{Title: title, User: user(c), CSRF: tok, ShippedExample: s.d.Tolerances.IsShippedExample(),
		ToleranceSource: s.d.Tolerances.Source(), Year: s.d.Now().Year(), Data: data}
}

func (s *server) render(c echo.Context, status int, name, title string, data any) error {
	return s.renderPage(c, status, name, s.page(c, title, data))
}

func (s *server) renderPage(c echo.Context, status int, name string, p page) error {
	buf := bufPool.Get().(*bytes.Buffer)
	buf.Reset()
	defer bufPool.Put(buf)
	if err := s.tpl[name].ExecuteTemplate(buf, "layout", p); err != nil {
		return err
	}
	return c.HTMLBlob(status, buf.Bytes())
}

// bufPool reuses page buffers: a page is tens of kilobytes.
var bufPool = sync.Pool{New: func() any { b := new(bytes.Buffer); b.Grow(32 << 10); return b }}

// fail renders the error page with a message for people.
func (s *server) fail(c echo.Context, status int, msg string) error {
	return s.render(c, status, "error", http.StatusText(status), msg)
}

// failErr renders a domain error with the status its code calls for.
func (s *server) failErr(c echo.Context, err error) error {
	switch halfmark.ErrorCodeOf(err) {
	case halfmark.ENotFound:
		return s.fail(c, http.StatusNotFound, messageOf(err))
	case halfmark.EInvalid:
		return s.fail(c, http.StatusUnprocessableEntity, err.Error())
	case halfmark.EForbidden:
		return s.fail(c, http.StatusForbidden, messageOf(err))
	case halfmark.EConflict:
		return s.fail(c, http.StatusConflict, messageOf(err))
	case halfmark.EUnavailable:
		return s.fail(c, http.StatusServiceUnavailable, messageOf(err))
	}
	s.d.Log.Error("dashboard", "path", c.Request().URL.Path, "err", err)
	return s.fail(c, http.StatusInternalServerError, "Something went wrong on the server; the error is in the server log.")
}

var funcs = template.FuncMap{
	"glyph":     glyph,
	"lower":     strings.ToLower,
	"levelText": levelText,
	"levelCSS":  levelCSS,
	"when":      when,
	"day":       func(t time.Time) string { return t.Local().Format("2006-01-02") },
	"mm":        mm,
	"mmp":       func(p *float64) string { return mmPtr(p) },
	"signed":    signed,
	"signedp": func(p *float64) string {
		if p == nil {
			return "—"
		}
		return signed(*p)
	},
	"whenp": func(p *time.Time) string {
		if p == nil {
			return "—"
		}
		return when(*p)
	},
	"dayp": func(p *time.Time) string {
		if p == nil {
			return "—"
		}
		return p.Local().Format("2006-01-02")
	},
	"glyphSymbols": func() template.HTML { return glyphSymbols },
	"verdictWords": verdictWords,
	"component":    halfmark.Component.Label,
	"crossing":     crossingText,
	"allows":       func(u *halfmark.User, r string) bool { return u != nil && u.Role.Allows(halfmark.Role(r)) },
}

func when(t time.Time) string {
	if t.IsZero() {
		return "—"
	}
	return t.Local().Format("2006-01-02 15:04")
}

// mm formats a length in mm with two decimals.
func mm(v float64) string {
	if math.IsNaN(v) {
		return "—"
	}
	return fmt.Sprintf("%.2f", v)
}

func mmPtr(p *float64) string {
	if p == nil {
		return "—"
	}
	return mm(*p)
}

// signed formats a deviation in mm with its sign: "+0.42", "−1.10".
func signed(v float64) string {
	if math.IsNaN(v) {
		return "—"
	}
	s := fmt.Sprintf("%+.2f", v)
	return strings.Replace(s, "-", "−", 1)
}

// verdictWords says what the drift engine checked and found: "in control"
// only where the control-chart tests ran and passed, "within tolerance"
// where only the limits could be checked.
func verdictWords(verdict string, l halfmark.Level) string {
	switch verdict {
	case halfmark.VerdictInControl:
		return "in control (control-chart tests ran and passed)"
	case halfmark.VerdictWithinTolerance:
		return "within tolerance (only the limits could be checked)"
	case halfmark.VerdictBaselinePending:
		return "within tolerance; baseline pending (too few points for the control charts)"
	case halfmark.VerdictSignal:
		return l.String()
	case halfmark.VerdictNotEvaluated:
		return "not evaluated (the data cannot be evaluated; see the signal line)"
	}
	return "evaluation pending"
}
