package notify

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net/http"
	"time"

	"halfmark"
)

// maxPerRun bounds the rows one RunOnce handles, so that a long backlog
// does not keep one call busy indefinitely; the next call continues.
const maxPerRun = 500

// recordTimeout bounds the recording of a send's outcome. It runs even when
// the caller's context is cancelled, because a send that succeeded must be
// recorded or it will be sent again.
const recordTimeout = 15 * time.Second

// Deliverer sends the rows of the outbox. Several deliverers, in one
// process or many, may run at once: each row is claimed under a row lock
// (halfmark.OutboxStore.ClaimOutbox), so no two send the same row
// concurrently.
type Deliverer struct {
	store halfmark.OutboxStore
	cfg   Config
	log   *slog.Logger
	http  *http.Client
}

// New returns a deliverer reading the outbox through store, with cfg's zero
// fields set to their defaults. A nil log discards messages.
func New(store halfmark.OutboxStore, cfg Config, log *slog.Logger) *Deliverer {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &Deliverer{store: store, cfg: cfg.withDefaults(), log: log, http: newWebhookClient()}
}

// RunOnce delivers the due rows (not delivered, next_attempt_at ≤ Now,
// fewer than MaxAttempts attempts), most urgent level first, and returns
// how many it delivered. Each row is handled under its own claim:
//
//  1. ClaimOutbox locks one row; another deliverer skips it while it is
//     held.
//  2. The notification is sent while the row is held.
//  3. On success the delivery is recorded (Delivered) at once; on failure
//     the attempt, its error and the next attempt time Now + backoff are
//     recorded (Failed; see backoff).
//
// When a channel's server cannot be reached (no connection, TLS or
// authentication failure, HTTP 5xx or 429), the rest of that channel's rows
// are left for a later run instead of each waiting for its own timeout;
// they keep their attempt counts. A failure of one message (a recipient
// refused, HTTP 4xx) affects only its row.
//
// Delivery is at-least-once, not exactly-once: if the SMTP server or
// webhook receiver accepts a notification and the delivery is not recorded
// (this process dies or loses the database before step 3 commits, or the
// server ends the transaction during a slow send: keep
// idle_in_transaction_session_timeout above SMTPTimeout and
// WebhookTimeout), the row is still undelivered when it is released and is
// sent again. The copy is recognisable: an e-mail carries the same
// Message-ID (derived from the dedupe key, RFC 5322 §3.6.4) and
// X-Halfmark-Delivery header, and a webhook the same X-Halfmark-Delivery,
// so the receiving side can drop it.
//
// The error is non-nil when a send failed (joined, one per failed row; the
// rows are rescheduled) or the store failed (RunOnce stops there).
func (d *Deliverer) RunOnce(ctx context.Context) (delivered int, err error) {
	var (
		tried    []int64
		sendErrs []error
		down     []string // channels whose server failed this run
	)
	for len(tried) < maxPerRun {
		if err := ctx.Err(); err != nil {
			return delivered, errors.Join(append(sendErrs, err)...)
		}
		id, found, sendErr, dbErr := d.deliverNext(ctx, tried, down)
		if dbErr != nil {
			return delivered, errors.Join(append(sendErrs, dbErr)...)
		}
		if !found {
			break
		}
		tried = append(tried, id)
		if sendErr != nil {
			sendErrs = append(sendErrs, sendErr)
			var de *channelDownError
			if errors.As(sendErr, &de) {
				down = append(down, de.channel)
			}
			continue
		}
		delivered++
	}
	if len(sendErrs) > 0 {
		return delivered, fmt.Errorf("%d of %d notifications failed; each is rescheduled with backoff until MaxAttempts: %w",
			len(sendErrs), len(tried), errors.Join(sendErrs...))
	}
	return delivered, nil
}

// deliverNext claims, sends and records one row. found is false when no
// row is due (or all due rows are held by other deliverers).
func (d *Deliverer) deliverNext(ctx context.Context, skip []int64, skipChannels []string) (id int64, found bool, sendErr, dbErr error) {
	claim, ok, err := d.store.ClaimOutbox(ctx, halfmark.OutboxDue{
		Now: d.cfg.now(), MaxAttempts: d.cfg.MaxAttempts, SkipIDs: skip, SkipChannels: skipChannels})
	if err != nil {
		return 0, false, nil, dbError("claim an outbox row", err)
	}
	if !ok {
		return 0, false, nil, nil
	}
	defer claim.Release(context.WithoutCancel(ctx))
	r := claim.Row()

	sendErr = d.send(ctx, r)

	// Record the outcome even if ctx was cancelled meanwhile: a successful
	// send that is not recorded would be sent again.
	rctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), recordTimeout)
	defer cancel()
	now := d.cfg.now()
	attempts := r.Attempts + 1
	if sendErr == nil {
		if err := claim.Delivered(rctx, now); err != nil {
			d.log.Error("notification sent but its delivery could not be recorded; it will be sent again with the same Message-ID / X-Halfmark-Delivery",
				"outbox_id", r.ID, "key", r.DedupeKey, "err", err)
			return r.ID, true, nil, dbError("record a delivery", err)
		}
		d.log.Info("notification delivered", "outbox_id", r.ID, "channel", r.Channel, "level", int(r.Level),
			"key", r.DedupeKey, "attempts", attempts)
		return r.ID, true, nil, nil
	}

	delay := backoff(attempts, d.cfg.BaseBackoff, d.cfg.MaxBackoff, rand.Float64())
	next := now.Add(delay)
	msg := sendErr.Error()
	if err := claim.Failed(rctx, next, msg); err != nil {
		return r.ID, true, sendErr, dbError("record a failed delivery", err)
	}
	if attempts >= d.cfg.MaxAttempts {
		d.log.Error("notification given up after the last attempt; it stays in the outbox with its last error",
			"outbox_id", r.ID, "channel", r.Channel, "level", int(r.Level), "key", r.DedupeKey,
			"attempts", attempts, "err", msg)
	} else {
		d.log.Warn("notification failed; will retry", "outbox_id", r.ID, "channel", r.Channel, "level", int(r.Level),
			"key", r.DedupeKey, "attempts", attempts, "next_attempt_at", next, "err", msg)
	}
	return r.ID, true, fmt.Errorf("outbox row %d (%s): %w", r.ID, r.DedupeKey, sendErr), nil
}

// channelDownError marks a failure of the channel's server rather than of
// one message.
type channelDownError struct {
	channel string
	err     error
}

func (e *channelDownError) Error() string { return e.err.Error() }
func (e *channelDownError) Unwrap() error { return e.err }

func (d *Deliverer) send(ctx context.Context, r halfmark.OutboxRow) error {
	switch r.Channel {
	case ChannelEmail:
		return d.sendEmail(ctx, r, d.cfg.now())
	case ChannelWebhook:
		return d.postWebhook(ctx, r, d.cfg.now())
	}
	return fmt.Errorf("outbox channel %q is unknown: expected %q or %q", r.Channel, ChannelEmail, ChannelWebhook)
}

// dbError keeps a store error's code (EUnavailable from the db package)
// and otherwise marks it unavailable: the outbox is retried shortly.
func dbError(what string, err error) error {
	var he *halfmark.Error
	if errors.As(err, &he) {
		return err
	}
	return &halfmark.Error{Code: halfmark.EUnavailable, Message: "notification outbox: could not " + what + " (" + err.Error() + "); retry shortly", Err: err}
}
