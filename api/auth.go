package api

import (
	"strings"

	"github.com/labstack/echo/v4"

	"halfmark"
)

const actorKey = halfmark.ActorKey

// authenticate reads "Authorization: Bearer <token>" and stores the actor.
// Another middleware (the dashboard's session) may have set it already.
func (h *handlers) authenticate(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if _, ok := c.Get(actorKey).(halfmark.Actor); ok {
			return next(c)
		}
		auth := c.Request().Header.Get(echo.HeaderAuthorization)
		scheme, secret, ok := strings.Cut(auth, " ")
		if !ok || !strings.EqualFold(scheme, "Bearer") || strings.TrimSpace(secret) == "" {
			return halfmark.Errorf(halfmark.EUnauthorized,
				"send an API token as \"Authorization: Bearer <token>\"; create one with `halfmark token create --name N --role R`")
		}
		a, err := h.s.Auth.Authenticate(c.Request().Context(), strings.TrimSpace(secret))
		if err != nil {
			return err
		}
		c.Set(actorKey, a)
		return next(c)
	}
}

// need refuses callers whose role is below role.
func need(role halfmark.Role) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			a := actor(c)
			if !a.Role.Allows(role) {
				return halfmark.Errorf(halfmark.EForbidden, "this needs the %s role; your token has the %s role", role, a.Role)
			}
			return next(c)
		}
	}
}

// actor returns the authenticated caller.
func actor(c echo.Context) halfmark.Actor {
	a, _ := c.Get(actorKey).(halfmark.Actor)
	return a
}
