// Package worker runs Halfmark's scheduled work: evaluation of every series
// against its baseline and the tolerance book (analysis/drift), the alert
// lifecycle that follows from it (db), the morning digest and the delivery
// of queued notifications. Each scheduled tick runs on exactly one worker
// process, however many are started (EvaluationStore.ClaimSlot).
package worker

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"sync"
	"sync/atomic"
	"time"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/analysis/tolerance"
)

// Config configures a Worker. Zero fields take the defaults.
type Config struct {
	TolerancesPath string         // "" : the shipped example
	Location       *time.Location // site time zone of the schedule; nil: time.Local
	WorkerID       string         // names this process in job_runs; "": host:pid

	// Cron specifications (robfig/cron, five fields or @every).
	IncrementalSpec string // default "* * * * *": series with new points
	FullSpec        string // default "30 2 * * *": every series
	DigestSpec      string // default "0 7 * * *": the Level 1 digest
	DeliverySpec    string // default "@every 30s": send queued notifications

	// Status says when a check is overdue (overdue alerts); zero fields
	// take halfmark.DefaultStatusOptions, Location the schedule's.
	Status halfmark.StatusOptions
	// Notifier composes the notifications of findings that open or
	// escalate to Level 2 or 3; the store writes them in the finding's
	// transaction (nil: none).
	Notifier halfmark.FindingNotifier
	// Penumbra reads penumbra data for the likely cause of a penumbra
	// finding (nil: no cause is given).
	Penumbra      halfmark.PenumbraService
	EnqueueDigest func(ctx context.Context, day time.Time, loc *time.Location) error
	Deliver       func(ctx context.Context) (int, error)

	// Observe, if set, receives the duration of every job run this worker
	// performed (for the evaluation-duration metric).
	Observe func(job string, took time.Duration)

	Now func() time.Time // nil: time.Now
}

func (c Config) withDefaults() Config {
	if c.Location == nil {
		c.Location = time.Local
	}
	if c.WorkerID == "" {
		h, _ := os.Hostname()
		c.WorkerID = fmt.Sprintf("%s:%d", h, os.Getpid())
	}
	if c.IncrementalSpec == "" {
		c.IncrementalSpec = "* * * * *"
	}
	if c.FullSpec == "" {
		c.FullSpec = "30 2 * * *"
	}
	if c.DigestSpec == "" {
		c.DigestSpec = "0 7 * * *"
	}
	if c.DeliverySpec == "" {
		c.DeliverySpec = "@every 30s"
	}
	if c.Status.MorningInterval == 0 {
		c.Status.MorningInterval = halfmark.DefaultStatusOptions.MorningInterval
		c.Status.MorningGrace = halfmark.DefaultStatusOptions.MorningGrace
		c.Status.SkipWeekends = halfmark.DefaultStatusOptions.SkipWeekends
	}
	if c.Status.MonthlyInterval == 0 {
		c.Status.MonthlyInterval = halfmark.DefaultStatusOptions.MonthlyInterval
	}
	if c.Status.Location == nil {
		c.Status.Location = c.Location
	}
	if c.Now == nil {
		c.Now = time.Now
	}
	return c
}

// Worker evaluates machines and runs the schedule.
type Worker struct {
	store     halfmark.EvaluationStore
	cfg       Config
	log       *slog.Logger
	book      atomic.Pointer[tolerance.Book]
	detection atomic.Pointer[drift.Detection]
	// evalMu keeps one evaluation of this process at a time: a scheduled
	// run and an evaluation on write never store the same machine at once.
	evalMu sync.Mutex
}

// New loads the tolerance book and returns a worker; it does not start the
// schedule (see Start).
func New(store halfmark.EvaluationStore, cfg Config, log *slog.Logger) (*Worker, error) {
	if log == nil {
		log = slog.Default()
	}
	w := &Worker{store: store, cfg: cfg.withDefaults(), log: log}
	b, err := tolerance.Load(cfg.TolerancesPath)
	if err != nil {
		return nil, err
	}
	det, err := detectionOf(b)
	if err != nil {
		return nil, err
	}
	w.book.Store(b)
	w.detection.Store(&det)
	if b.IsShippedExample() {
		log.Warn("no --tolerances file: the shipped example (AAPM TG-142 defaults) is in force; the local physicist should review it", "hash", b.Hash())
	} else {
		log.Info("tolerances loaded", "file", b.Source(), "hash", b.Hash())
	}
	return w, nil
}

// detectionOf is the engine's chart design: the shipped defaults with the
// book's [detection] table over them.
func detectionOf(b *tolerance.Book) (drift.Detection, error) {
	d := drift.DefaultDetection()
	if err := b.DecodeDetection(&d); err != nil {
		return d, err
	}
	if err := d.Validate(); err != nil {
		return d, fmt.Errorf("tolerances %s: [detection]: %w", b.Source(), err)
	}
	return d, nil
}

// Detection returns the chart design in force.
func (w *Worker) Detection() drift.Detection { return *w.detection.Load() }

// Tolerances returns the book in force.
func (w *Worker) Tolerances() halfmark.ToleranceBook { return w.book.Load() }

// Reload re-reads the tolerance file. A bad file is refused (the error
// names the line) and the book in force stays.
func (w *Worker) Reload() error {
	b, err := tolerance.Load(w.cfg.TolerancesPath)
	var det drift.Detection
	if err == nil {
		det, err = detectionOf(b)
	}
	if err != nil {
		w.log.Error("tolerance file refused; the previous book stays in force", "err", err, "hash", w.book.Load().Hash())
		return err
	}
	w.detection.Store(&det)
	old := w.book.Swap(b)
	w.log.Info("tolerances reloaded", "file", b.Source(), "hash", b.Hash(), "previous_hash", old.Hash())
	return nil
}

// RunOnce runs one incremental evaluation and one delivery round, outside
// the schedule (halfmark worker --once).
func (w *Worker) RunOnce(ctx context.Context) error {
	s, err := w.Evaluate(ctx, false)
	if err != nil {
		return err
	}
	w.log.Info("evaluation done", "machines", s.Machines, "series", s.Series, "points", s.Points, "findings_level1", s.Findings[1], "findings_level2", s.Findings[2], "findings_level3", s.Findings[3])
	if w.cfg.Deliver != nil {
		n, err := w.cfg.Deliver(ctx)
		if err != nil {
			return fmt.Errorf("deliver notifications: %w", err)
		}
		w.log.Info("notifications delivered", "count", n)
	}
	return nil
}
