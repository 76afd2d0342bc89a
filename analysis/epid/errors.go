package epid

import (
	"errors"
	"fmt"
)

// Sentinel errors. Every error returned by this package wraps one of them, so
// callers can sort failures with errors.Is and still show the wrapped message,
// which names the bad value and says what to fix.
var (
	// ErrNotDICOM: the bytes are not a DICOM Part 10 file, or its structure is
	// broken (truncated, an element longer than the file, a parser failure).
	ErrNotDICOM = errors.New("epid: not a readable DICOM file")
	// ErrUnsupported: a valid DICOM file this package cannot analyse
	// (compressed or encapsulated pixel data, colour, 1-bit pixels, no pixels).
	ErrUnsupported = errors.New("epid: unsupported DICOM image")
	// ErrMissingTag: an attribute needed for the geometry is absent or empty
	// and no override was given in DecodeOptions. The error is a *TagError.
	ErrMissingTag = errors.New("epid: required DICOM attribute missing")
	// ErrInvalidImage: an Image whose size, spacing, distances or pixel values
	// cannot be analysed.
	ErrInvalidImage = errors.New("epid: invalid image")
	// ErrInvalidOption: an option value out of range.
	ErrInvalidOption = errors.New("epid: invalid option")
	// ErrNoField: no radiation field (or picket) could be found in the image:
	// no contrast, or a profile that never crosses the required level.
	ErrNoField = errors.New("epid: field not found")
)

// TagError reports a DICOM attribute that is missing or unusable. It wraps
// ErrMissingTag (missing) or ErrInvalidImage (present but unusable).
type TagError struct {
	Keyword string // DICOM keyword, e.g. "RTImageSID"
	Tag     string // "(3002,0026)"
	Problem string // what is wrong and how to fix it
	missing bool
}

func (e *TagError) Error() string {
	if e.missing {
		return fmt.Sprintf("epid: missing %s %s: %s", e.Keyword, e.Tag, e.Problem)
	}
	return fmt.Sprintf("epid: bad %s %s: %s", e.Keyword, e.Tag, e.Problem)
}

// Unwrap lets errors.Is match ErrMissingTag or ErrInvalidImage.
func (e *TagError) Unwrap() error {
	if e.missing {
		return ErrMissingTag
	}
	return ErrInvalidImage
}

func missingTag(keyword, tag, problem string) error {
	return &TagError{Keyword: keyword, Tag: tag, Problem: problem, missing: true}
}

func badTag(keyword, tag, problem string) error {
	return &TagError{Keyword: keyword, Tag: tag, Problem: problem}
}
