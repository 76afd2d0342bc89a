package main

import (
	"context"
	"flag"
	"fmt"
	"log/slog"
	"time"

	"halfmark/worker"
	"halfmark/worker/notify"
)

// workerFlags configure the drift engine and its schedule. Notification
// settings come from HALFMARK_SMTP_*, HALFMARK_WEBHOOK_* and
// HALFMARK_NOTIFY_LEVEL1..3 (see notify.ConfigFromEnv).
type workerFlags struct {
	tolerances    string
	timezone      string
	once          bool
	evaluateEvery time.Duration
	deliverEvery  time.Duration
}

func (w *workerFlags) register(fs *flag.FlagSet, withOnce bool) {
	fs.StringVar(&w.tolerances, "tolerances", "", "tolerance book (TOML, see analysis/tolerance/example.toml); empty: the shipped AAPM TG-142 example. SIGHUP reloads it")
	fs.StringVar(&w.timezone, "timezone", "Local", "site time zone of the schedule (IANA name such as Europe/Berlin, or Local)")
	fs.DurationVar(&w.evaluateEvery, "evaluate-every", time.Minute, "how often series with new points are evaluated (each interval runs on one worker only)")
	fs.DurationVar(&w.deliverEvery, "deliver-every", 30*time.Second, "how often queued notifications are sent")
	if withOnce {
		fs.BoolVar(&w.once, "once", false, "run one evaluation and one notification delivery, then exit")
	}
}

// build makes the worker with its notification hooks; observe (may be nil)
// receives job durations for the metrics.
func (w workerFlags) build(e env, st *store, log *slog.Logger, observe func(string, time.Duration)) (*worker.Worker, error) {
	if w.evaluateEvery < time.Second || w.deliverEvery < time.Second {
		return nil, exitUsage{fmt.Errorf("--evaluate-every and --deliver-every must be at least 1s")}
	}
	loc, err := time.LoadLocation(w.timezone)
	if err != nil {
		return nil, exitUsage{fmt.Errorf("--timezone %q: %v; use an IANA name such as Europe/Berlin, or Local", w.timezone, err)}
	}
	ncfg, err := notify.ConfigFromEnv(e.getenv)
	if err != nil {
		return nil, err
	}
	ncfg.Location = loc
	composer := notify.NewComposer(ncfg)
	deliverer := notify.New(st.DB, ncfg, log)
	return worker.New(st.DB, worker.Config{
		TolerancesPath:  w.tolerances,
		Location:        loc,
		IncrementalSpec: "@every " + w.evaluateEvery.String(),
		DeliverySpec:    "@every " + w.deliverEvery.String(),
		Observe:         observe,
		Notifier:        composer,
		Penumbra:        st.DB,
		EnqueueDigest: func(ctx context.Context, day time.Time, loc *time.Location) error {
			return notify.EnqueueDigest(ctx, st.DB, composer, day, loc)
		},
		Deliver: deliverer.RunOnce,
	}, log)
}
