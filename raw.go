package halfmark

import (
	"context"
	"encoding/json"
	"time"
)

// RawKind says what raw data a check carries.
type RawKind string

// Raw data kinds.
const (
	RawProfile RawKind = "profile" // a 1-D profile: CSV of position_mm, signal
	RawImage   RawKind = "image"   // an EPID image (DICOM RT Image) analysed for jaw edges
	RawPicket  RawKind = "picket"  // an EPID picket-fence image analysed for MLC leaf positions
)

// RawData is the raw measurement behind a check, kept so that its edge
// results can be recomputed when the analysis improves.
type RawData struct {
	ID              int64           `json:"id"`
	CheckID         string          `json:"check_id"`
	Kind            RawKind         `json:"kind"`
	Filename        string          `json:"filename"`
	Content         []byte          `json:"-"`
	Options         json.RawMessage `json:"options,omitempty"`  // analysis options used (JSON)
	Analysis        json.RawMessage `json:"analysis,omitempty"` // the analysis result (JSON)
	AnalysisVersion string          `json:"analysis_version"`
	CreatedAt       time.Time       `json:"created_at"`
	CreatedBy       string          `json:"created_by"`
}

// RawService keeps raw data. Raw data is append-only like checks.
type RawService interface {
	// AttachRaw stores raw data for an existing check.
	AttachRaw(ctx context.Context, a Actor, r *RawData) error
	// Raw returns one raw record with its content; ENotFound when absent.
	Raw(ctx context.Context, id int64) (RawData, error)
	// RawForCheck lists a check's raw records without their content.
	RawForCheck(ctx context.Context, checkID string) ([]RawData, error)
}
