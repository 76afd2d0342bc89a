package api

import (
	_ "embed"
	"net/http"

	"github.com/labstack/echo/v4"
)

//go:embed openapi.yaml
var openapiYAML []byte

func (h *handlers) openapi(c echo.Context) error {
	return c.Blob(http.StatusOK, "application/yaml", openapiYAML)
}
