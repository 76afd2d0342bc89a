package web

import (
	"net/http"
	"net/url"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/api"
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
		if !strings.HasPrefix(c.Request().URL.Path, "/static/") {
			h.Set("Cache-Control", "no-store")
		}
		return next(c)
	}
}

// secure reports whether the request reached us over TLS, directly or
// through a proxy that says so.
func secure(c echo.Context) bool {
	return c.Request().TLS != nil || strings.EqualFold(c.Request().Header.Get("X-Forwarded-Proto"), "https")
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
		HttpOnly: true, SameSite: http.SameSiteLaxMode, Secure: secure(c)})
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
				api.SetActor(c, u.Actor())
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

func (s *server) login(c echo.Context) error {
	email, pw, next := c.FormValue("email"), c.FormValue("password"), localPath(c.FormValue("next"))
	u, err := s.d.Users.AuthenticateUser(c.Request().Context(), email, pw)
	if err != nil {
		code := halfmark.ErrorCodeOf(err)
		if code != halfmark.EUnauthorized && code != halfmark.EForbidden {
			return err
		}
		status := http.StatusUnauthorized
		if code == halfmark.EForbidden {
			status = http.StatusForbidden
		}
		return s.render(c, status, "login", "Sign in", loginData{Email: email, Next: next, Error: messageOf(err)})
	}
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
// single slash; anything else becomes "/".
func localPath(p string) string {
	if p == "" || p[0] != '/' || strings.HasPrefix(p, "//") || strings.HasPrefix(p, "/\\") || strings.ContainsAny(p, "\r\n") {
		return "/"
	}
	return p
}

// messageOf is the part of an error that is written for people.
func messageOf(err error) string {
	if he, ok := err.(*halfmark.Error); ok {
		return he.Message
	}
	return "an unexpected error occurred"
}
