package profile

import (
	"errors"
	"fmt"
)

// Errors returned by Analyze and ParseCSV. Returned errors wrap one of these
// (test with errors.Is) and add the offending value and what to fix.
var (
	// ErrTooFewSamples: fewer than MinSamples distinct positions.
	ErrTooFewSamples = errors.New("profile: too few samples")
	// ErrNotFinite: a position or signal is NaN, ±Inf or out of range.
	ErrNotFinite = errors.New("profile: value not finite or out of range")
	// ErrNoSignal: no positive signal, or a non-positive signal where the
	// field should be.
	ErrNoSignal = errors.New("profile: no positive signal")
	// ErrConflictingRepeats: samples at the same position disagree by more
	// than the noise allows.
	ErrConflictingRepeats = errors.New("profile: repeated positions disagree")
	// ErrNoCrossing: the profile never falls through a level on one side.
	ErrNoCrossing = errors.New("profile: level not crossed")
	// ErrNoField: the profile does not show a field with two edges (a
	// spike, a one-sample dip, or an edge at the end of the scan).
	ErrNoField = errors.New("profile: no field with two edges")
	// ErrFit: the Hill fit of an FFF edge failed or gave an implausible edge.
	ErrFit = errors.New("profile: edge fit failed")
	// ErrOptions: an Options field has an unknown value.
	ErrOptions = errors.New("profile: invalid option")
	// ErrNoData: the CSV input holds no data rows.
	ErrNoData = errors.New("profile: no data rows")
	// ErrTooManyRows: the CSV input holds more than MaxCSVRows data rows.
	ErrTooManyRows = errors.New("profile: too many rows")
)

// ParseError reports a CSV line that could not be read. Line is 1-based.
type ParseError struct {
	Line   int
	Reason string
	Err    error // a sentinel above, or nil
}

func (e *ParseError) Error() string {
	return fmt.Sprintf("profile: line %d: %s", e.Line, e.Reason)
}

func (e *ParseError) Unwrap() error { return e.Err }
