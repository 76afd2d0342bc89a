package halfmark

import (
	"context"
	"time"
)

// EdgeVerdict is the stored evaluation of one series that a check added a
// point to, as the drift engine last wrote it.
type EdgeVerdict struct {
	SeriesID int64    `json:"series_id"`
	Edge     string   `json:"edge"`
	Quantity Quantity `json:"quantity"`
	// Evaluated is false until an evaluation has seen the check; Level and
	// Rule are then those of an older evaluation (or empty) and say
	// nothing about this check.
	Evaluated   bool       `json:"evaluated"`
	Level       Level      `json:"level"`
	Rule        string     `json:"rule,omitempty"`
	EvaluatedAt *time.Time `json:"evaluated_at,omitempty"`
}

// VerdictService reads stored evaluations; it never evaluates.
type VerdictService interface {
	// CheckVerdicts lists, for each series a current check feeds, the
	// stored level, position series first, then by edge; ENotFound when the check
	// does not exist.
	CheckVerdicts(ctx context.Context, checkID string) ([]EdgeVerdict, error)
}
