package api

import (
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/labstack/echo/v4"
)

// FuzzDecodeCheck: any body gives either a decoded request or a
// transport-level refusal (4xx), never a panic.
func FuzzDecodeCheck(f *testing.F) {
	f.Add(`{"machine_id":1,"beam_id":"2","kind":"morning","measured_at":"2026-01-01T00:00:00Z","edges":[{"edge":"X1","position_mm":50}]}`)
	f.Add(`{"checks":[{"id":"x"}]}`)
	f.Add("[[[[[[")
	f.Add("{\"note\":\"\xff\"}")
	e := echo.New()
	f.Fuzz(func(t *testing.T, body string) {
		req := httptest.NewRequest(http.MethodPost, "/", strings.NewReader(body))
		req.Header.Set("Content-Type", "application/json")
		c := e.NewContext(req, httptest.NewRecorder())
		var cr batchRequest
		err := decodeJSON(c, &cr)
		if err == nil {
			return
		}
		p := problemFor(err)
		if p.Status < 400 || p.Status >= 500 {
			t.Fatalf("decode error mapped to %d: %v", p.Status, err)
		}
	})
}
