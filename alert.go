package halfmark

import (
	"context"
	"time"
)

// Level is an AAPM TG-142 action level (Klein et al., Med Phys 36:4197,
// 2009): 0 in control, 1 inspection, 2 scheduled action, 3 immediate action.
type Level int

// The levels.
const (
	LevelInControl Level = 0 // no signal
	LevelInspect   Level = 1 // statistical signal or projected crossing, still inside tolerance
	LevelScheduled Level = 2 // beyond tolerance
	LevelImmediate Level = 3 // beyond the action limit
)

// String is the level's name as shown to people.
func (l Level) String() string {
	switch l {
	case LevelInspect:
		return "Level 1 — inspection"
	case LevelScheduled:
		return "Level 2 — scheduled action"
	case LevelImmediate:
		return "Level 3 — immediate action"
	}
	return "in control"
}

// AlertState is where an alert is in its lifecycle.
type AlertState string

// Alert states: open → acknowledged → resolved.
const (
	AlertOpen         AlertState = "open"
	AlertAcknowledged AlertState = "acknowledged"
	AlertResolved     AlertState = "resolved"
)

// Alert is one signal on one series (or on a beam, for an overdue check).
// There is at most one unresolved alert per (series, rule family); a
// repeat signal updates it.
type Alert struct {
	ID                int64      `json:"id"`
	MachineID         int64      `json:"machine_id"`
	MachineName       string     `json:"machine_name"`
	BeamID            int64      `json:"beam_id"`
	BeamLabel         string     `json:"beam_label"`
	SeriesID          *int64     `json:"series_id"` // nil for a beam-level alert (overdue)
	Edge              string     `json:"edge"`      // "X2", "B1P23", "X1+X2" for a pair, "" for overdue
	Quantity          Quantity   `json:"quantity"`
	Geometry          string     `json:"geometry"`
	Family            string     `json:"family"` // rule family: limit, shewhart, ewma, cusum, nelson, trend, overdue
	Rule              string     `json:"rule"`   // the rule that fired, e.g. "beyond action limit", "Nelson 2"
	Level             Level      `json:"level"`
	State             AlertState `json:"state"`
	Message           string     `json:"message"` // says which machine, beam, edge, how far and how soon
	DeviationMM       *float64   `json:"deviation_mm"`
	ToleranceMM       *float64   `json:"tolerance_mm"`
	ActionMM          *float64   `json:"action_mm"`
	ProjectedCrossing *time.Time `json:"projected_crossing"`
	OpenedAt          time.Time  `json:"opened_at"`
	UpdatedAt         time.Time  `json:"updated_at"`
	AckBy             string     `json:"acknowledged_by,omitempty"`
	AckAt             *time.Time `json:"acknowledged_at,omitempty"`
	AckComment        string     `json:"acknowledge_comment,omitempty"`
	ResolvedBy        string     `json:"resolved_by,omitempty"`
	ResolvedAt        *time.Time `json:"resolved_at,omitempty"`
	ResolveComment    string     `json:"resolve_comment,omitempty"`
}

// AlertFilter selects alerts.
type AlertFilter struct {
	MachineID int64
	SeriesID  int64
	States    []AlertState // empty: open and acknowledged
	Limit     int
}

// AlertService reads alerts and moves them through their lifecycle.
type AlertService interface {
	// Alerts lists alerts, most urgent (level, then newest) first.
	Alerts(ctx context.Context, f AlertFilter) ([]Alert, error)
	// Alert returns one alert; ENotFound when absent.
	Alert(ctx context.Context, id int64) (Alert, error)
	// Acknowledge marks an open alert as seen; EConflict when it is not open.
	Acknowledge(ctx context.Context, a Actor, id int64, comment string) (Alert, error)
	// Resolve closes an alert by hand; a comment is required.
	Resolve(ctx context.Context, a Actor, id int64, comment string) (Alert, error)
}

// WorstSeries is the most urgent active finding of a machine, with the
// series fields of its first evidence series.
type WorstSeries struct {
	FindingID         *int64        `json:"finding_id"`
	ComponentKind     ComponentKind `json:"component_kind"`
	Component         string        `json:"component"`
	SeriesID          int64         `json:"series_id"`
	BeamID            int64         `json:"beam_id"`
	BeamLabel         string        `json:"beam_label"`
	Edge              string        `json:"edge"`
	Quantity          Quantity      `json:"quantity"`
	Geometry          string        `json:"geometry"`
	DeviationMM       *float64      `json:"deviation_mm"`
	ToleranceMM       *float64      `json:"tolerance_mm"`
	ActionMM          *float64      `json:"action_mm"`
	Rule              string        `json:"rule"`
	ProjectedCrossing *time.Time    `json:"projected_crossing"`
}

// MachineStatus is one row of the front page.
type MachineStatus struct {
	ID          int64        `json:"id"`
	Name        string       `json:"name"`
	Level       Level        `json:"level"`
	Overdue     bool         `json:"overdue"`
	Findings    int          `json:"findings"`    // active findings
	OpenAlerts  int          `json:"open_alerts"` // kept for compatibility: per-series evidence alerts
	LastCheckAt *time.Time   `json:"last_check_at"`
	Worst       *WorstSeries `json:"worst"`
}

// StatusService answers the front page: machines most urgent first
// (Level 3, 2, 1, overdue, in control).
type StatusService interface {
	Status(ctx context.Context) ([]MachineStatus, error)
}

// ServiceEvent is a note on a machine ("X2 jaw recalibrated"). When
// NewBaseline is set, the named edges' series (all series when Edges is
// empty) start a new baseline period at At; earlier points stay.
type ServiceEvent struct {
	ID          int64     `json:"id"`
	MachineID   int64     `json:"machine_id"`
	At          time.Time `json:"at"`
	Note        string    `json:"note"`
	Edges       []string  `json:"edges"`
	NewBaseline bool      `json:"new_baseline"`
	CreatedBy   string    `json:"created_by"`
	CreatedAt   time.Time `json:"created_at"`
}
