package api

import (
	"errors"
	"log/slog"
	"net/http"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// Problem is an RFC 9457 problem details body. Errors lists each bad field
// with what to fix.
type Problem struct {
	Type     string                `json:"type"`
	Title    string                `json:"title"`
	Status   int                   `json:"status"`
	Detail   string                `json:"detail,omitempty"`
	Instance string                `json:"instance,omitempty"`
	Errors   []halfmark.FieldError `json:"errors,omitempty"`
}

// ProblemContentType is the media type of problem bodies (RFC 9457 §3).
const ProblemContentType = "application/problem+json"

var statusOf = map[halfmark.ErrorCode]int{
	halfmark.EInvalid:      http.StatusUnprocessableEntity,
	halfmark.ENotFound:     http.StatusNotFound,
	halfmark.EConflict:     http.StatusConflict,
	halfmark.EUnauthorized: http.StatusUnauthorized,
	halfmark.EForbidden:    http.StatusForbidden,
	halfmark.EUnavailable:  http.StatusServiceUnavailable,
	halfmark.EInternal:     http.StatusInternalServerError,
}

// requestError is a transport-level refusal (malformed JSON, size, media
// type) with its own status.
type requestError struct {
	status int
	msg    string
	fields []halfmark.FieldError
}

func (e *requestError) Error() string { return e.msg }

func badRequest(status int, msg string, fields ...halfmark.FieldError) error {
	return &requestError{status: status, msg: msg, fields: fields}
}

// problemFor builds the problem body for any error.
func problemFor(err error) Problem {
	var re *requestError
	var he *halfmark.Error
	var ee *echo.HTTPError
	switch {
	case errors.As(err, &re):
		return Problem{Type: typeURI(re.status), Title: http.StatusText(re.status), Status: re.status, Detail: re.msg, Errors: re.fields}
	case halfmark.Unavailable(err):
		return Problem{Type: typeURI(503), Title: http.StatusText(503), Status: 503, Detail: "the database is not available; retry shortly"}
	case errors.As(err, &he):
		st := statusOf[he.Code]
		if st == 0 {
			st = http.StatusInternalServerError
		}
		p := Problem{Type: typeURI(st), Title: http.StatusText(st), Status: st, Detail: he.Message, Errors: he.Fields}
		if st == http.StatusInternalServerError {
			p.Detail = "an internal error occurred; it has been logged"
		}
		return p
	case isTooLarge(err):
		return Problem{Type: typeURI(413), Title: http.StatusText(413), Status: 413, Detail: "the request body is over the size limit"}
	case errors.As(err, &ee):
		msg, _ := ee.Message.(string)
		if ee.Code == http.StatusNotFound {
			msg = "no such route; the API lives under /api/v1 (see /api/v1/openapi.yaml)"
		}
		if ee.Code == http.StatusRequestEntityTooLarge {
			msg = "the request body is over the 1 MiB limit; split a large import into batches"
		}
		return Problem{Type: typeURI(ee.Code), Title: http.StatusText(ee.Code), Status: ee.Code, Detail: msg}
	}
	return Problem{Type: typeURI(500), Title: http.StatusText(500), Status: 500, Detail: "an internal error occurred; it has been logged"}
}

func typeURI(status int) string {
	switch status {
	case 400:
		return "urn:halfmark:problem:malformed-request"
	case 401:
		return "urn:halfmark:problem:unauthenticated"
	case 403:
		return "urn:halfmark:problem:forbidden"
	case 404:
		return "urn:halfmark:problem:not-found"
	case 409:
		return "urn:halfmark:problem:conflict"
	case 413:
		return "urn:halfmark:problem:too-large"
	case 415:
		return "urn:halfmark:problem:unsupported-media-type"
	case 422:
		return "urn:halfmark:problem:invalid-input"
	case 503:
		return "urn:halfmark:problem:unavailable"
	}
	return "about:blank"
}

// ErrorHandler writes every error as problem+json and logs server faults.
func ErrorHandler(log *slog.Logger) echo.HTTPErrorHandler {
	return func(err error, c echo.Context) {
		if c.Response().Committed {
			return
		}
		p := problemFor(err)
		p.Instance = c.Request().URL.Path
		switch {
		case p.Status == http.StatusServiceUnavailable:
			log.Warn("request refused: dependency unavailable", "path", c.Request().URL.Path, "method", c.Request().Method, "err", err)
		case p.Status >= 500:
			log.Error("request failed", "path", c.Request().URL.Path, "method", c.Request().Method, "err", err)
		}
		if p.Status == http.StatusServiceUnavailable {
			c.Response().Header().Set("Retry-After", "5")
		}
		if p.Status == http.StatusUnauthorized {
			c.Response().Header().Set("WWW-Authenticate", `Bearer realm="halfmark"`)
		}
		c.Response().Header().Set(echo.HeaderContentType, ProblemContentType)
		c.Response().WriteHeader(p.Status)
		if c.Request().Method == http.MethodHead {
			return
		}
		_ = jsonEncode(c.Response(), p)
	}
}
