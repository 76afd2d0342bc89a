package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// MaxBody is the largest request body accepted, in bytes (1 MiB).
const MaxBody = 1 << 20

// decodeJSON reads a JSON body into v: the media type must be JSON, the
// body at most MaxBody bytes, one value, no unknown fields.
func decodeJSON(c echo.Context, v any) error {
	r := c.Request()
	ct := r.Header.Get(echo.HeaderContentType)
	mt, _, err := mime.ParseMediaType(ct)
	if err != nil || (mt != "application/json" && !strings.HasSuffix(mt, "+json")) {
		return badRequest(http.StatusUnsupportedMediaType,
			fmt.Sprintf("send the body as JSON with Content-Type: application/json (got %q)", ct))
	}
	body, err := io.ReadAll(io.LimitReader(r.Body, MaxBody+1))
	if isTooLarge(err) {
		return badRequest(http.StatusRequestEntityTooLarge,
			"the request body is over the 1 MiB limit; split a large import into batches")
	}
	if err != nil {
		return badRequest(http.StatusBadRequest, "the request body could not be read: "+err.Error())
	}
	if len(body) > MaxBody {
		return badRequest(http.StatusRequestEntityTooLarge,
			"the request body is over the 1 MiB limit; split a large import into batches")
	}
	if !utf8.Valid(body) {
		return badRequest(http.StatusBadRequest, "the body is not valid UTF-8; send JSON text encoded as UTF-8")
	}
	dec := json.NewDecoder(bytes.NewReader(body))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return jsonProblem(err, body)
	}
	if dec.More() {
		return badRequest(http.StatusBadRequest, "the body holds more than one JSON value; send exactly one object")
	}
	return nil
}

// jsonProblem explains a decoding error in terms of the field or byte.
func jsonProblem(err error, body []byte) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	var fe *fieldErr
	switch {
	case errors.As(err, &se):
		msg := fmt.Sprintf("malformed JSON at byte %d: %s", se.Offset, se.Error())
		if bytes.Contains(body, []byte("NaN")) || bytes.Contains(body, []byte("Infinity")) {
			msg += " (JSON has no NaN or Infinity; every number must be finite)"
		}
		return badRequest(http.StatusBadRequest, msg)
	case errors.As(err, &te):
		field := te.Field
		want := te.Type.String()
		switch want {
		case "float64":
			want = "a finite number"
		case "int64", "int":
			want = "an integer"
		case "string":
			want = "a string"
		}
		return badRequest(http.StatusBadRequest, "a field has the wrong type",
			halfmark.FieldError{Field: field, Message: fmt.Sprintf("must be %s (got %s)", want, te.Value)})
	case errors.As(err, &fe):
		return badRequest(http.StatusBadRequest, "a field has the wrong type", halfmark.FieldError{Field: fe.field, Message: fe.msg})
	case errors.Is(err, io.EOF):
		return badRequest(http.StatusBadRequest, "the request body is empty; send a JSON object")
	case errors.Is(err, io.ErrUnexpectedEOF):
		return badRequest(http.StatusBadRequest, "the JSON body ends early (truncated?)")
	case strings.HasPrefix(err.Error(), "json: unknown field"):
		name := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
		return badRequest(http.StatusBadRequest, "the body has a field this API does not know",
			halfmark.FieldError{Field: name, Message: "is not a known field; check its spelling against /api/v1/openapi.yaml"})
	}
	return badRequest(http.StatusBadRequest, "malformed JSON: "+err.Error())
}

type fieldErr struct{ field, msg string }

func (e *fieldErr) Error() string { return e.field + ": " + e.msg }

// ID is a record id sent as a JSON number or a string of digits.
type ID int64

// UnmarshalJSON accepts 12 and "12".
func (id *ID) UnmarshalJSON(b []byte) error {
	s := strings.Trim(string(b), `"`)
	if s == "null" {
		*id = 0
		return nil
	}
	n, err := strconv.ParseInt(s, 10, 64)
	if err != nil || n < 0 {
		return &fieldErr{"", fmt.Sprintf("%s is not a record id: ids are positive integers", b)}
	}
	*id = ID(n)
	return nil
}

func jsonEncode(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	return enc.Encode(v)
}

// pathID reads a positive integer path parameter.
func pathID(c echo.Context, name string) (int64, error) {
	n, err := strconv.ParseInt(c.Param(name), 10, 64)
	if err != nil || n <= 0 {
		return 0, halfmark.Errorf(halfmark.ENotFound, "%s %q is not a record id", name, c.Param(name))
	}
	return n, nil
}

// pathCheckID reads a check id (a UUID) from the path; anything else is
// ENotFound, never a lookup.
func pathCheckID(c echo.Context) (string, error) {
	id := c.Param("id")
	if !halfmark.IsUUID(id) {
		return "", halfmark.Errorf(halfmark.ENotFound, "%q is not a check id; check ids are UUIDs such as 0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60", id)
	}
	return strings.ToLower(id), nil
}
