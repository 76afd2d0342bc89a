package halfmark

import (
	"context"
	"time"
)

// SeriesData is one series as the drift engine reads it: identity, the
// baseline in force at the evaluation time, the CUSUM restart point and its
// current points in measurement order.
type SeriesData struct {
	ID, MachineID, BeamID                  int64
	MachineName, BeamLabel, Geometry, Edge string
	Quantity                               Quantity
	Method                                 Method
	Clinical                               bool
	// Baseline in force (nil: none set; estimated from the period's first
	// points).
	BaselineValueMM, BaselineSigmaMM *float64
	BaselineFrom                     *time.Time // start of the baseline period
	CUSUMRestart                     *time.Time // restart the CUSUM after this point

	Times         []time.Time
	ValuesMM      []float64
	Kinds         []CheckKind
	CheckIDs      []string
	LastCreatedAt time.Time // newest checks.created_at among the points
}

// SeriesSignal is one rule family firing on a series' newest point: stored
// as a per-series alert, the evidence of a finding, never notified alone.
type SeriesSignal struct {
	Family  string `json:"family"`
	Rule    string `json:"rule"`
	Level   Level  `json:"level"`
	Message string `json:"message"`
}

// SeriesVerdict is the engine's decision about one series in one run.
type SeriesVerdict struct {
	Series        SeriesData // identity (points are not stored again)
	Evaluation    SeriesEvaluation
	Signals       []SeriesSignal
	BackInControl bool // the newest points are in control: resolve the series' alerts
}

// ComponentVerdict is the engine's decision about one component in one run:
// a finding to open or keep (Active), or one to resolve (BackInControl).
type ComponentVerdict struct {
	Finding       Finding // identity, level, magnitude, onset, crossing, evidence, message
	Active        bool
	BackInControl bool
}

// MachineEvaluation is what one run of the drift engine decided for one
// machine: every series and every component.
type MachineEvaluation struct {
	MachineID     int64
	At            time.Time
	ToleranceHash string
	Series        []SeriesVerdict
	Components    []ComponentVerdict
}

// Notification is one message to deliver (outbox row).
type Notification struct {
	Channel    string // "email" or "webhook"
	Level      Level
	FindingID  int64
	DigestDay  string // "2006-01-02" for a daily digest
	DedupeKey  string // a repeat enqueue with the same key is a no-op
	Subject    string
	Body       string
	Payload    []byte // webhook JSON
	Recipients []string
}

// FindingNotifier composes the notifications of a finding that opened or
// escalated to Level 2 or 3 (pure: no I/O; the store writes them in the
// same transaction as the finding).
type FindingNotifier interface {
	FindingNotifications(f Finding) []Notification
}

// StatusOptions say when a check is overdue.
type StatusOptions struct {
	// MorningInterval + MorningGrace is the longest a beam may go without a
	// morning check (default 24 h + 6 h). With SkipWeekends, time on
	// Saturdays and Sundays (in Location) does not count: a Friday check
	// covers the weekend (TG-142 daily checks are per treatment day).
	MorningInterval, MorningGrace time.Duration
	SkipWeekends                  bool
	// MonthlyInterval is the longest a beam may go without a monthly check
	// (default 31 days).
	MonthlyInterval time.Duration
	Location        *time.Location
}

// DefaultStatusOptions are the defaults of StatusOptions: a morning check
// every treatment day (24 h + 6 h grace, weekends skipped; TG-142 daily
// checks) and a monthly check every 31 days.
var DefaultStatusOptions = StatusOptions{MorningInterval: 24 * time.Hour, MorningGrace: 6 * time.Hour, SkipWeekends: true,
	MonthlyInterval: 31 * 24 * time.Hour, Location: time.Local}

// EvaluationStore is what the worker needs of the store to run the drift
// engine: which machines to evaluate, their series, and one transaction
// that stores a machine's decisions with their notifications.
type EvaluationStore interface {
	// MachinesToEvaluate lists every machine (changedOnly false) or those
	// with a check, baseline or service event stored since their last
	// evaluation.
	MachinesToEvaluate(ctx context.Context, changedOnly bool) ([]int64, error)
	// LoadMachineSeries reads every series of a machine with its points
	// and the baselines in force at at.
	LoadMachineSeries(ctx context.Context, machineID int64, at time.Time) ([]SeriesData, error)
	// RecordMachineEvaluation stores one machine's evaluation in one
	// transaction: series states and charts, evidence alerts, findings and
	// their notifications (n may be nil: none).
	RecordMachineEvaluation(ctx context.Context, ev *MachineEvaluation, n FindingNotifier) error
	// SyncOverdueAlerts opens and resolves beam-level overdue alerts.
	SyncOverdueAlerts(ctx context.Context, now time.Time, o StatusOptions) (opened, resolved int, err error)
	// ClaimSlot runs fn once for (job, slot) over every worker process.
	ClaimSlot(ctx context.Context, job string, slot time.Time, worker string, fn func(context.Context) (string, error)) (ran bool, err error)
}
