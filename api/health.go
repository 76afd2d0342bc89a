package api

import (
	"context"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
)

func (h *handlers) healthz(c echo.Context) error {
	return c.JSON(http.StatusOK, map[string]string{"status": "alive"})
}

// readyz answers 200 only while the database answers within 2 s.
func (h *handlers) readyz(c echo.Context) error {
	ctx, cancel := context.WithTimeout(c.Request().Context(), 2*time.Second)
	defer cancel()
	if err := h.s.Pinger.Ping(ctx); err != nil {
		c.Response().Header().Set("Retry-After", "5")
		return c.JSON(http.StatusServiceUnavailable, map[string]string{"status": "not ready", "reason": "the database does not answer"})
	}
	if h.s.RoleWarning != "" {
		return c.JSON(http.StatusOK, map[string]string{"status": "ready", "warning": h.s.RoleWarning})
	}
	return c.JSON(http.StatusOK, map[string]string{"status": "ready"})
}
