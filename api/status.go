package api

import (
	"net/http"

	"github.com/labstack/echo/v4"
)

// status serves GET /api/v1/status: machines most urgent first.
func (h *handlers) status(c echo.Context) error {
	st, err := h.s.Status.Status(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"machines": nonNil(st)})
}
