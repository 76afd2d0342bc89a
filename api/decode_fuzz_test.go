package api

import (
	"fmt"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// FuzzDecodeCheck: any body gives either a refusal with a 4xx status, or a
// decoded batch whose checks either validate or are refused with 422 and
// field errors that each name a field under its own checks[i] (the rule
// "bad input: a clear 4xx naming the field").
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
		if err != nil {
			p := problemFor(err)
			if p.Status < 400 || p.Status >= 500 {
				t.Fatalf("decode error mapped to %d: %v", p.Status, err)
			}
			return
		}
		var f halfmark.Fields
		now := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
		for i := range cr.Checks {
			prefix := fmt.Sprintf("checks[%d].", i)
			chk := cr.Checks[i].toCheck(prefix, &f)
			f = append(f, chk.Validate(prefix, now)...)
		}
		verr := f.Err("the batch is not valid")
		if len(f) == 0 {
			if verr != nil {
				t.Fatalf("no field errors but an error: %v", verr)
			}
			return
		}
		if p := problemFor(verr); p.Status != http.StatusUnprocessableEntity {
			t.Fatalf("field errors mapped to %d, want 422: %v", p.Status, verr)
		}
		for _, fe := range f {
			if !strings.HasPrefix(fe.Field, "checks[") || fe.Message == "" {
				t.Fatalf("field error %+v does not name its check and field", fe)
			}
		}
	})
}
