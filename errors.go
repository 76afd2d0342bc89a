package halfmark

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"syscall"
)

// ErrorCode classifies a domain error; api/ maps each code to an HTTP status.
type ErrorCode string

// The error codes every service may return.
const (
	EInvalid      ErrorCode = "invalid"      // the input breaks a rule; Fields say which
	ENotFound     ErrorCode = "not_found"    // the named record does not exist
	EConflict     ErrorCode = "conflict"     // the request clashes with a stored record
	EUnauthorized ErrorCode = "unauthorized" // no valid credentials
	EForbidden    ErrorCode = "forbidden"    // valid credentials, insufficient role
	EUnavailable  ErrorCode = "unavailable"  // a dependency (the database) is down; retry later
	EInternal     ErrorCode = "internal"     // a bug or an unexpected failure
)

// FieldError names one bad input field and says what is wrong with it.
// Field is a JSON-path-like name ("edges[1].penumbra_mm"); Line is a
// 1-based input line for file imports (0 when not applicable).
type FieldError struct {
	Field   string `json:"field,omitempty"`
	Line    int    `json:"line,omitempty"`
	Message string `json:"message"`
}

func (f FieldError) String() string {
	var b strings.Builder
	if f.Line > 0 {
		fmt.Fprintf(&b, "line %d: ", f.Line)
	}
	if f.Field != "" {
		b.WriteString(f.Field)
		b.WriteString(": ")
	}
	b.WriteString(f.Message)
	return b.String()
}

// Error is the single domain error type. Message is written for the person
// who has to fix the input, not for the developer.
type Error struct {
	Code    ErrorCode
	Message string
	Fields  []FieldError
	Err     error // wrapped cause, never shown to clients
}

func (e *Error) Error() string {
	if len(e.Fields) == 0 {
		return e.Message
	}
	parts := make([]string, 0, len(e.Fields))
	for _, f := range e.Fields {
		parts = append(parts, f.String())
	}
	return e.Message + ": " + strings.Join(parts, "; ")
}

func (e *Error) Unwrap() error { return e.Err }

// Errorf returns an *Error with the given code and formatted message.
func Errorf(code ErrorCode, format string, args ...any) *Error {
	return &Error{Code: code, Message: fmt.Sprintf(format, args...)}
}

// Invalid returns an EInvalid error carrying field errors.
func Invalid(message string, fields ...FieldError) *Error {
	return &Error{Code: EInvalid, Message: message, Fields: fields}
}

// ErrorCodeOf returns the code of err's *Error, EInternal for any other
// non-nil error and "" for nil.
func ErrorCodeOf(err error) ErrorCode {
	if err == nil {
		return ""
	}
	var e *Error
	if errors.As(err, &e) {
		return e.Code
	}
	return EInternal
}

// Fields accumulates field errors during validation.
type Fields []FieldError

// Add appends a field error with a formatted message.
func (f *Fields) Add(field, format string, args ...any) {
	*f = append(*f, FieldError{Field: field, Message: fmt.Sprintf(format, args...)})
}

// Err returns nil when no field error was added, else an EInvalid *Error.
func (f Fields) Err(message string) error {
	if len(f) == 0 {
		return nil
	}
	return Invalid(message, f...)
}

// Unavailable reports whether err says a dependency could not be reached or
// went away mid-request (a dropped or refused connection, a server shutting
// down), so that the request may be retried: EUnavailable, an SQLSTATE of
// class 08 (connection exception) or 57 (operator intervention), or a
// network error. PostgreSQL documentation, Appendix A "PostgreSQL Error
// Codes".
func Unavailable(err error) bool {
	if err == nil {
		return false
	}
	if ErrorCodeOf(err) == EUnavailable {
		return true
	}
	var st interface{ SQLState() string }
	if errors.As(err, &st) {
		c := st.SQLState()
		return strings.HasPrefix(c, "08") || strings.HasPrefix(c, "57")
	}
	var ne net.Error
	if errors.As(err, &ne) {
		return true
	}
	if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) || errors.Is(err, net.ErrClosed) ||
		errors.Is(err, syscall.ECONNRESET) || errors.Is(err, syscall.ECONNREFUSED) || errors.Is(err, syscall.EPIPE) ||
		errors.Is(err, context.DeadlineExceeded) {
		return true
	}
	// pgx reports a connection it had to close with these words and no type.
	msg := err.Error()
	return strings.Contains(msg, "conn closed") || strings.Contains(msg, "closed pool") ||
		strings.Contains(msg, "failed to connect") || strings.Contains(msg, "unexpected EOF")
}
