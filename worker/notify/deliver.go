package notify

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net/http"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"halfmark"
)

// maxPerRun bounds the rows one RunOnce handles, so that a long backlog
// does not keep one call busy indefinitely; the next call continues.
const maxPerRun = 500

// recordTimeout bounds the UPDATE that records a send's outcome. It runs
// even when the caller's context is cancelled, because a send that
// succeeded must be recorded or it will be sent again.
const recordTimeout = 15 * time.Second

// Deliverer sends the rows of the outbox. Several deliverers, in one
// process or many, may run at once: each row is claimed under a row lock
// (FOR UPDATE SKIP LOCKED), so no two send the same row concurrently.
type Deliverer struct {
	pool *pgxpool.Pool
	cfg  Config
	log  *slog.Logger
	http *http.Client
}

// New returns a deliverer with cfg's zero fields set to their defaults. A
// nil log discards messages.
func New(pool *pgxpool.Pool, cfg Config, log *slog.Logger) *Deliverer {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &Deliverer{pool: pool, cfg: cfg.withDefaults(), log: log, http: newWebhookClient()}
}

// claimedRow is an outbox row locked for delivery.
type claimedRow struct {
	id         int64
	channel    string
	level      int
	dedupeKey  string
	subject    string
	body       string
	payload    []byte
	recipients []string
	attempts   int
}

// RunOnce delivers the due rows (not delivered, next_attempt_at ≤ Now,
// fewer than MaxAttempts attempts), most urgent level first, and returns
// how many it delivered. Each row is handled in its own transaction:
//
//  1. SELECT … FOR UPDATE SKIP LOCKED claims one row; another deliverer
//     skips it while it is locked, and sees it delivered once committed.
//  2. The notification is sent while the lock is held.
//  3. On success delivered_at is set and the transaction commits at once;
//     on failure attempts is incremented, last_error recorded, and
//     next_attempt_at moved to Now + backoff (see backoff).
//
// When a channel's server cannot be reached (no connection, TLS or
// authentication failure, HTTP 5xx or 429), the rest of that channel's rows
// are left for a later run instead of each waiting for its own timeout;
// they keep their attempt counts. A failure of one message (a recipient
// refused, HTTP 4xx) affects only its row.
//
// Delivery is exactly-once except for one window: if the SMTP server or
// webhook receiver accepts the notification and this process dies (or
// loses the database) before the commit in step 3, the row is still
// undelivered when its lock is released and it is sent again, i.e. the
// guarantee is at-least-once. The same holds if the server ends the
// transaction during a slow send (an idle_in_transaction_session_timeout
// shorter than SMTPTimeout or WebhookTimeout): keep that setting above them. The copy is recognisable: an e-mail carries
// the same Message-ID (derived from the dedupe key, RFC 5322 §3.6.4) and
// X-Halfmark-Delivery header, and a webhook the same X-Halfmark-Delivery,
// so the receiving side can drop it.
//
// The error is non-nil when a send failed (joined, one per failed row; the
// rows are rescheduled) or the database failed (RunOnce stops there).
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

const claimOutbox = `SELECT id, channel, level, dedupe_key, subject, body, payload, recipients, attempts
FROM outbox
WHERE delivered_at IS NULL AND next_attempt_at <= $1 AND attempts < $2
  AND NOT (id = ANY($3)) AND NOT (channel = ANY($4))
ORDER BY level DESC, next_attempt_at, id
LIMIT 1
FOR UPDATE SKIP LOCKED`

// deliverNext claims, sends and records one row. found is false when no
// row is due (or all due rows are locked by other deliverers).
func (d *Deliverer) deliverNext(ctx context.Context, skip []int64, skipChannels []string) (id int64, found bool, sendErr, dbErr error) {
	tx, err := d.pool.Begin(ctx)
	if err != nil {
		return 0, false, nil, dbError("start a delivery transaction", err)
	}
	defer func() { _ = tx.Rollback(context.WithoutCancel(ctx)) }()

	if skip == nil {
		skip = []int64{}
	}
	if skipChannels == nil {
		skipChannels = []string{}
	}
	var r claimedRow
	err = tx.QueryRow(ctx, claimOutbox, d.cfg.now(), d.cfg.MaxAttempts, skip, skipChannels).Scan(
		&r.id, &r.channel, &r.level, &r.dedupeKey, &r.subject, &r.body, &r.payload, &r.recipients, &r.attempts)
	if errors.Is(err, pgx.ErrNoRows) {
		return 0, false, nil, nil
	}
	if err != nil {
		return 0, false, nil, dbError("claim an outbox row", err)
	}

	sendErr = d.send(ctx, r)

	// Record the outcome even if ctx was cancelled meanwhile: a successful
	// send that is not recorded would be sent again.
	rctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), recordTimeout)
	defer cancel()
	now := d.cfg.now()
	attempts := r.attempts + 1
	if sendErr == nil {
		if _, err := tx.Exec(rctx, `UPDATE outbox SET delivered_at = $2, attempts = $3, last_error = NULL WHERE id = $1`,
			r.id, now, attempts); err != nil {
			d.log.Error("notification sent but its delivery could not be recorded; it may be sent once more with the same Message-ID / X-Halfmark-Delivery",
				"outbox_id", r.id, "key", r.dedupeKey, "err", err)
			return r.id, true, nil, dbError("record a delivery", err)
		}
		if err := tx.Commit(rctx); err != nil {
			d.log.Error("notification sent but its delivery could not be committed; it may be sent once more with the same Message-ID / X-Halfmark-Delivery",
				"outbox_id", r.id, "key", r.dedupeKey, "err", err)
			return r.id, true, nil, dbError("commit a delivery", err)
		}
		d.log.Info("notification delivered", "outbox_id", r.id, "channel", r.channel, "level", r.level,
			"key", r.dedupeKey, "attempts", attempts)
		return r.id, true, nil, nil
	}

	delay := backoff(attempts, d.cfg.BaseBackoff, d.cfg.MaxBackoff, rand.Float64())
	next := now.Add(delay)
	msg := sendErr.Error()
	if _, err := tx.Exec(rctx, `UPDATE outbox SET attempts = $2, next_attempt_at = $3, last_error = $4 WHERE id = $1`,
		r.id, attempts, next, msg); err != nil {
		return r.id, true, sendErr, dbError("record a failed delivery", err)
	}
	if err := tx.Commit(rctx); err != nil {
		return r.id, true, sendErr, dbError("commit a failed delivery", err)
	}
	if attempts >= d.cfg.MaxAttempts {
		d.log.Error("notification given up after the last attempt; it stays in the outbox with its last error",
			"outbox_id", r.id, "channel", r.channel, "level", r.level, "key", r.dedupeKey,
			"attempts", attempts, "err", msg)
	} else {
		d.log.Warn("notification failed; will retry", "outbox_id", r.id, "channel", r.channel, "level", r.level,
			"key", r.dedupeKey, "attempts", attempts, "next_attempt_at", next, "err", msg)
	}
	return r.id, true, fmt.Errorf("outbox row %d (%s): %w", r.id, r.dedupeKey, sendErr), nil
}

// channelDownError marks a failure of the channel's server rather than of
// one message.
type channelDownError struct {
	channel string
	err     error
}

func (e *channelDownError) Error() string { return e.err.Error() }
func (e *channelDownError) Unwrap() error { return e.err }

func (d *Deliverer) send(ctx context.Context, r claimedRow) error {
	switch r.channel {
	case ChannelEmail:
		return d.sendEmail(ctx, r, d.cfg.now())
	case ChannelWebhook:
		return d.postWebhook(ctx, r, d.cfg.now())
	}
	return fmt.Errorf("outbox channel %q is unknown: expected %q or %q", r.channel, ChannelEmail, ChannelWebhook)
}

func dbError(what string, err error) error {
	return &halfmark.Error{Code: halfmark.EUnavailable, Message: "notification outbox: could not " + what + " (" + err.Error() + "); retry shortly", Err: err}
}
