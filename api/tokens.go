package api

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"halfmark"
)

type tokenRequest struct {
	Name string `json:"name"`
	Role string `json:"role"`
}

func (h *handlers) createToken(c echo.Context) error {
	var req tokenRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	t, secret, err := h.s.Auth.CreateToken(c.Request().Context(), actor(c), req.Name, halfmark.Role(req.Role))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, struct {
		halfmark.Token
		Secret string `json:"token"`
	}{t, secret})
}

func (h *handlers) listTokens(c echo.Context) error {
	ts, err := h.s.Auth.Tokens(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"tokens": nonNil(ts)})
}

func (h *handlers) revokeToken(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if err := h.s.Auth.RevokeToken(c.Request().Context(), actor(c), id); err != nil {
		return err
	}
	return c.NoContent(http.StatusNoContent)
}
