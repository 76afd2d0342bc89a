package web

import (
	"net"
	"net/http"
	"net/url"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

const (
	sessionCookie = "hm_session"
	userKey       = "halfmark.web.user"
)

// headers sets the security headers of every dashboard response: a CSP
// that allows no inline script or style and no framing, no MIME sniffing,
// and a same-origin referrer.
func (s *server) headers(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Response().Header()
		h.Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data:; object-src 'none'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'")
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "same-origin")
		h.Set("X-Frame-Options", "DENY")
		c.Set(tlsKey, s.secure(c))
		if !strings.HasPrefix(c.Request().URL.Path, "/static/") {
			h.Set("Cache-Control", "no-store")
		}
		return next(c)
	}
}

// tlsKey holds, for handlers, what s.secure said of the request.
const tlsKey = "halfmark.web.tls"

// secure reports what the headers middleware found: whether the request
// came over TLS (cookies are then Secure).
func secure(c echo.Context) bool {
	v, _ := c.Get(tlsKey).(bool)
	return v || c.Request().TLS != nil
}

// secure reports whether the request reached us over TLS, directly or
// through a trusted proxy (Deps.TrustedProxies) that says so.
func (s *server) secure(c echo.Context) bool {
	r := c.Request()
	if r.TLS != nil {
		return true
	}
	if !strings.EqualFold(r.Header.Get("X-Forwarded-Proto"), "https") {
		return false
	}
	host, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		host = r.RemoteAddr
	}
	ip := net.ParseIP(host)
	for _, n := range s.d.TrustedProxies {
		if ip != nil && n.Contains(ip) {
			return true
		}
	}
	return false
}

// session loads the signed-in user, if any, from the session cookie.
func (s *server) session(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		ck, err := c.Cookie(sessionCookie)
		if err != nil || ck.Value == "" {
			return next(c)
		}
		u, err := s.sessionUser(c, ck.Value)
		if err != nil {
			if halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
				return err
			}
			s.setSessionCookie(c, "", -1)
			return next(c)
		}
		c.Set(userKey, u)
		return next(c)
	}
}

// sessionUser looks a session up, through the short-lived cache.
func (s *server) sessionUser(c echo.Context, token string) (halfmark.User, error) {
	now := time.Now()
	if u, ok := s.sessions.get(token, now); ok {
		return u, nil
	}
	u, err := s.d.Sessions.SessionUser(c.Request().Context(), token, s.d.SessionIdle, s.d.SessionMaxAge)
	if err != nil {
		return u, err
	}
	s.sessions.put(token, u, now)
	return u, nil
}

func (s *server) setSessionCookie(c echo.Context, token string, maxAge int) {
	c.SetCookie(&http.Cookie{Name: sessionCookie, Value: token, Path: "/", MaxAge: maxAge,
		HttpOnly: true, SameSite: http.SameSiteLaxMode, Secure: s.secure(c)})
}

// user returns the signed-in user, or nil.
func user(c echo.Context) *halfmark.User {
	u, ok := c.Get(userKey).(halfmark.User)
	if !ok {
		return nil
	}
	return &u
}

// need sends a visitor without a session to the sign-in page and refuses a
// user whose role is below role.
func (s *server) need(role halfmark.Role) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			u := user(c)
			if u == nil {
				if c.Request().Method != http.MethodGet {
					return s.fail(c, http.StatusUnauthorized, "Your session has ended. Sign in again, then repeat the action.")
				}
				return c.Redirect(http.StatusSeeOther, "/login?next="+url.QueryEscape(c.Request().URL.RequestURI()))
			}
			if !u.Role.Allows(role) {
				return s.fail(c, http.StatusForbidden, "This needs the "+string(role)+" role; you are signed in as "+u.Email+" with the "+string(u.Role)+" role.")
			}
			return next(c)
		}
	}
}

// apiActor lets a signed-in browser read the JSON API with its session.
// Only safe methods are accepted this way: API writes need a bearer token,
// so a session cookie can never be used for a cross-site API write.
func (s *server) apiActor(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		r := c.Request()
		if (r.Method != http.MethodGet && r.Method != http.MethodHead) || !strings.HasPrefix(r.URL.Path, "/api/v1/") ||
			r.Header.Get(echo.HeaderAuthorization) != "" {
			return next(c)
		}
		if ck, err := c.Cookie(sessionCookie); err == nil && ck.Value != "" {
			if u, err := s.sessionUser(c, ck.Value); err == nil {
				c.Set(halfmark.ActorKey, u.Actor()) // read by the API's auth check
			}
		}
		return next(c)
	}
}

type loginData struct {
	Email, Next, Error string
}

func (s *server) loginPage(c echo.Context) error {
	if user(c) != nil {
		return c.Redirect(http.StatusSeeOther, "/")
	}
	return s.render(c, http.StatusOK, "login", "Sign in", loginData{Next: localPath(c.QueryParam("next"))})
}

// wrongSignIn is the one answer to every refused sign-in: unknown e-mail,
// wrong password, or an address held up by signInGuard.
const wrongSignIn = "The e-mail or the password is wrong. After several failures, sign-ins from this address are slowed down; wait a minute before trying again."

func (s *server) login(c echo.Context) error {
	email, pw, next := c.FormValue("email"), c.FormValue("password"), localPath(c.FormValue("next"))
	shown := email
	if halfmark.CheckText("email", email, 0, 320) != nil {
		shown = "" // never echo control characters or invalid UTF-8 back
	}
	addr, now := c.RealIP(), s.d.Now()
	if s.guard.blocked(email, addr, now) {
		return s.render(c, http.StatusUnauthorized, "login", "Sign in", loginData{Email: shown, Next: next, Error: wrongSignIn})
	}
	u, err := s.d.Users.AuthenticateUser(c.Request().Context(), email, pw)
	if err != nil {
		code := halfmark.ErrorCodeOf(err)
		if code != halfmark.EUnauthorized && code != halfmark.EForbidden && code != halfmark.EInvalid {
			return err
		}
		s.guard.failed(email, addr, now)
		return s.render(c, http.StatusUnauthorized, "login", "Sign in", loginData{Email: shown, Next: next, Error: wrongSignIn})
	}
	s.guard.succeeded(email, addr)
	token, err := s.d.Sessions.CreateSession(c.Request().Context(), u.ID)
	if err != nil {
		return err
	}
	s.setSessionCookie(c, token, int(s.d.SessionMaxAge.Seconds()))
	s.d.Log.Info("signed in", "user", u.Email, "role", u.Role)
	return c.Redirect(http.StatusSeeOther, next)
}

func (s *server) logout(c echo.Context) error {
	if ck, err := c.Cookie(sessionCookie); err == nil && ck.Value != "" {
		s.sessions.drop(ck.Value)
		if err := s.d.Sessions.EndSession(c.Request().Context(), ck.Value); err != nil {
			return err
		}
	}
	s.setSessionCookie(c, "", -1)
	return c.Redirect(http.StatusSeeOther, "/login")
}

// localPath keeps a redirect target on this site: a path starting with a
// single slash, with no backslash, no control character or space (browsers
// drop tabs and newlines, so "/\t/evil.example" would read as
// "//evil.example"), and still so after percent-decoding; anything else
// becomes "/". WHATWG URL Standard, basic URL parser (tab and newline
// removal, backslash as slash in special schemes).
func localPath(p string) string {
	d := p
	for i := 0; i < 4; i++ {
		if !sameSitePath(d) {
			return "/"
		}
		next, err := url.PathUnescape(d)
		if err != nil {
			return "/"
		}
		if next == d {
			return p
		}
		d = next
	}
	return "/"
}

func sameSitePath(p string) bool {
	if p == "" || p[0] != '/' || strings.HasPrefix(p, "//") {
		return false
	}
	for _, r := range p {
		if r <= ' ' || r == 0x7f || r == '\\' || (r >= 0x80 && r <= 0x9f) {
			return false
		}
	}
	u, err := url.Parse(p)
	return err == nil && u.Scheme == "" && u.Host == "" && u.User == nil
}

// messageOf is the part of an error that is written for people.
func messageOf(err error) string {
	if he, ok := err.(*halfmark.Error); ok {
		return he.Message
	}
	return "an unexpected error occurred"
}
