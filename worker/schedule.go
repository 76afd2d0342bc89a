package worker

import (
	"context"
	"fmt"
	"halfmark"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/robfig/cron/v3"
)

// Job names, as recorded in job_runs.
const (
	JobIncremental = "evaluate-incremental"
	JobFull        = "evaluate-full"
	JobDigest      = "digest"
	JobDelivery    = "deliver"
	JobOnWrite     = "evaluate-on-write" // a machine evaluated when its check is stored (not scheduled)
)

// Start runs the schedule until ctx ends, and reloads the tolerance book
// on SIGHUP. Every job runs through RunSlot, so a tick runs on one worker
// only; cron.SkipIfStillRunning drops a tick while the previous run of the
// same job is still busy, cron.Recover turns a panic into a log line.
func (w *Worker) Start(ctx context.Context) error {
	logger := cronLogger{w.log}
	c := cron.New(cron.WithLocation(w.cfg.Location), cron.WithLogger(logger),
		cron.WithChain(cron.Recover(logger), cron.SkipIfStillRunning(logger)))
	jobs := []struct {
		name, spec string
		slot       time.Duration
		run        func(ctx context.Context) (string, error)
	}{
		{JobIncremental, w.cfg.IncrementalSpec, slotOf(w.cfg.IncrementalSpec, time.Minute), func(ctx context.Context) (string, error) {
			s, err := w.Evaluate(ctx, false)
			return s.String(), err
		}},
		{JobFull, w.cfg.FullSpec, time.Minute, func(ctx context.Context) (string, error) {
			s, err := w.Evaluate(ctx, true)
			return s.String(), err
		}},
		{JobDigest, w.cfg.DigestSpec, time.Minute, func(ctx context.Context) (string, error) {
			if w.cfg.EnqueueDigest == nil {
				return "no digest configured", nil
			}
			return "digest queued", w.cfg.EnqueueDigest(ctx, w.cfg.Now(), w.cfg.Location)
		}},
		{JobDelivery, w.cfg.DeliverySpec, slotOf(w.cfg.DeliverySpec, 30*time.Second), func(ctx context.Context) (string, error) {
			if w.cfg.Deliver == nil {
				return "no delivery configured", nil
			}
			n, err := w.cfg.Deliver(ctx)
			return fmt.Sprintf("%d delivered", n), err
		}},
	}
	for _, j := range jobs {
		if _, err := c.AddFunc(j.spec, func() {
			slot := w.cfg.Now().Truncate(j.slot)
			start := time.Now()
			ran, err := w.RunSlot(ctx, j.name, slot, j.run)
			if err != nil {
				w.log.Error("job failed", "job", j.name, "slot", slot, "err", err)
			}
			if ran && w.cfg.Observe != nil {
				w.cfg.Observe(j.name, time.Since(start))
			}
		}); err != nil {
			return fmt.Errorf("schedule %s %q: %w", j.name, j.spec, err)
		}
	}
	c.Start()
	if l, ok := w.store.(halfmark.CheckListener); ok {
		go w.evaluateOnWrite(ctx, l)
	}
	w.log.Info("worker started", "worker", w.cfg.WorkerID, "timezone", w.cfg.Location.String(),
		"incremental", w.cfg.IncrementalSpec, "full", w.cfg.FullSpec, "digest", w.cfg.DigestSpec, "delivery", w.cfg.DeliverySpec)
	w.ReloadOnSIGHUP(ctx)
	<-c.Stop().Done()
	return nil
}

// ReloadOnSIGHUP reloads the tolerance book on every SIGHUP until ctx
// ends (Start calls it; a process that serves charts without the schedule
// calls it itself, so that SIGHUP does not end it).
func (w *Worker) ReloadOnSIGHUP(ctx context.Context) {
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	defer signal.Stop(hup)
	for {
		select {
		case <-ctx.Done():
			return
		case <-hup:
			_ = w.Reload() // logged; a bad file keeps the old book
		}
	}
}

// RunSlot runs job for one scheduled slot unless another worker has
// claimed it (db.ClaimSlot); ran says whether this worker ran it.
func (w *Worker) RunSlot(ctx context.Context, job string, slot time.Time, run func(context.Context) (string, error)) (ran bool, err error) {
	ran, err = w.store.ClaimSlot(ctx, job, slot, w.cfg.WorkerID, run)
	if ran && err == nil {
		w.log.Debug("job done", "job", job, "slot", slot)
	}
	return ran, err
}

// cronLogger adapts slog to cron.Logger.
type cronLogger struct{ l *slog.Logger }

func (c cronLogger) Info(msg string, kv ...any) { c.l.Debug("cron: "+msg, kv...) }
func (c cronLogger) Error(err error, msg string, kv ...any) {
	c.l.Error("cron: "+msg, append(kv, "err", err)...)
}

// slotOf is the scheduled slot of a job: the interval of an "@every D"
// spec, else def (the finest step of a cron spec that runs at most once
// per def).
func slotOf(spec string, def time.Duration) time.Duration {
	if d, ok := strings.CutPrefix(spec, "@every "); ok {
		if v, err := time.ParseDuration(strings.TrimSpace(d)); err == nil && v >= time.Second {
			return v
		}
	}
	return def
}

// evaluateOnWrite evaluates a machine as soon as a check of it is stored
// (by this or any other process): the level a check sets is visible within
// moments. Announcements that arrive during an evaluation are gathered and
// served by one more evaluation per machine. The scheduled incremental run
// stays as the safety net.
func (w *Worker) evaluateOnWrite(ctx context.Context, l halfmark.CheckListener) {
	var mu sync.Mutex
	pending := map[int64]bool{}
	wake := make(chan struct{}, 1)
	go func() {
		_ = l.ListenChecks(ctx, func(id int64) {
			mu.Lock()
			pending[id] = true
			mu.Unlock()
			select {
			case wake <- struct{}{}:
			default:
			}
		})
	}()
	for {
		select {
		case <-ctx.Done():
			return
		case <-wake:
		}
		mu.Lock()
		ids := make([]int64, 0, len(pending))
		for id := range pending {
			ids = append(ids, id)
		}
		clear(pending)
		mu.Unlock()
		for _, id := range ids {
			start := time.Now()
			if err := w.EvaluateMachineNow(ctx, id); err != nil {
				w.log.Error("evaluation on write failed; the scheduled run will retry", "machine", id, "err", err)
				continue
			}
			if w.cfg.Observe != nil {
				w.cfg.Observe(JobOnWrite, time.Since(start))
			}
		}
		// A finding that opened or escalated has its notification in the
		// outbox now: send it at once rather than at the next delivery slot
		// (rows are claimed with SKIP LOCKED, so this never doubles a send).
		if w.cfg.Deliver != nil && len(ids) > 0 {
			if _, err := w.cfg.Deliver(ctx); err != nil {
				w.log.Error("delivery after evaluation on write failed; the scheduled delivery will retry", "err", err)
			}
		}
	}
}
