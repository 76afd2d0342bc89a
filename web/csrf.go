package web

import (
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"net/http"

	"github.com/labstack/echo/v4"
)

// CSRF protection, bound to the session. The token of a form is
// SHA-256("halfmark csrf v1" ‖ 0 ‖ key) in URL-safe base64, where key is the
// session token of the signed-in browser (cookie hm_session) or, before
// sign-in, a random pre-session value (cookie _csrf). Both cookies are
// HttpOnly, so a page of another site can neither read the key nor compute
// the token, and a token taken from one session is worthless in another:
// signing in or out changes it. A state-changing request must carry the
// token in the form field _csrf (or the X-CSRF-Token header). OWASP
// Cross-Site Request Forgery Prevention Cheat Sheet, "synchronizer token"
// and "signed double-submit cookie" (common practice).
const (
	csrfCookie     = "_csrf"
	csrfField      = "_csrf"
	csrfContextKey = "csrf" // read by render (echo's middleware.DefaultCSRFConfig.ContextKey)
)

// csrfToken is the form token for a session or pre-session key.
func csrfToken(key string) string {
	h := sha256.New()
	h.Write([]byte("halfmark csrf v1\x00"))
	h.Write([]byte(key))
	return base64.RawURLEncoding.EncodeToString(h.Sum(nil))
}

// csrfKey is the key the request's token is bound to ("" when none).
func csrfKey(c echo.Context) string {
	if ck, err := c.Cookie(sessionCookie); err == nil && ck.Value != "" {
		return "s:" + ck.Value
	}
	if ck, err := c.Cookie(csrfCookie); err == nil && len(ck.Value) >= 32 {
		return "p:" + ck.Value
	}
	return ""
}

// csrf puts the request's token in the context for the forms and refuses a
// state-changing request whose token does not match its own session.
func (s *server) csrf(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		r := c.Request()
		key := csrfKey(c)
		switch r.Method {
		case http.MethodGet, http.MethodHead, http.MethodOptions:
			if key == "" {
				b := make([]byte, 32)
				if _, err := rand.Read(b); err != nil {
					return err
				}
				v := base64.RawURLEncoding.EncodeToString(b)
				c.SetCookie(&http.Cookie{Name: csrfCookie, Value: v, Path: "/", HttpOnly: true,
					SameSite: http.SameSiteStrictMode, Secure: s.secure(c)})
				key = "p:" + v
			}
			c.Set(csrfContextKey, csrfToken(key))
			return next(c)
		}
		sent := r.Header.Get("X-CSRF-Token")
		if sent == "" {
			sent = c.FormValue(csrfField)
		}
		if key == "" || sent == "" || subtle.ConstantTimeCompare([]byte(sent), []byte(csrfToken(key))) != 1 {
			return s.fail(c, http.StatusForbidden, "This form has expired or did not come from this site (no valid CSRF token). Reload the page and submit it again.")
		}
		c.Set(csrfContextKey, csrfToken(key))
		return next(c)
	}
}
