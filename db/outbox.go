package db

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

const outboxCols = `id, channel, level, coalesce(finding_id, 0), coalesce(to_char(digest_day, 'YYYY-MM-DD'), ''), dedupe_key,
	subject, body, payload, recipients, attempts, next_attempt_at, delivered_at, coalesce(last_error, '')`

func scanOutbox(r pgx.Row) (halfmark.OutboxRow, error) {
	var o halfmark.OutboxRow
	var level int
	err := r.Scan(&o.ID, &o.Channel, &level, &o.FindingID, &o.DigestDay, &o.DedupeKey,
		&o.Subject, &o.Body, &o.Payload, &o.Recipients, &o.Attempts, &o.NextAttemptAt, &o.DeliveredAt, &o.LastError)
	o.Level = halfmark.Level(level)
	return o, err
}

// claimOutbox picks one due row and locks it; SKIP LOCKED passes over the
// rows other deliverers hold, so no two send the same row at once.
const claimOutbox = `SELECT ` + outboxCols + `
FROM outbox
WHERE delivered_at IS NULL AND next_attempt_at <= $1 AND attempts < $2
  AND NOT (id = ANY($3)) AND NOT (channel = ANY($4))
ORDER BY level DESC, next_attempt_at, id
LIMIT 1
FOR UPDATE SKIP LOCKED`

// ClaimOutbox implements halfmark.OutboxStore. The claim holds a
// transaction (and the row lock) open until Delivered, Failed or Release.
func (d *DB) ClaimOutbox(ctx context.Context, due halfmark.OutboxDue) (halfmark.OutboxClaim, bool, error) {
	skipIDs, skipCh := due.SkipIDs, due.SkipChannels
	if skipIDs == nil {
		skipIDs = []int64{}
	}
	if skipCh == nil {
		skipCh = []string{}
	}
	tx, err := d.Pool.Begin(ctx)
	if err != nil {
		return nil, false, unavailable("start a delivery transaction", err)
	}
	row, err := scanOutbox(tx.QueryRow(ctx, claimOutbox, due.Now, due.MaxAttempts, skipIDs, skipCh))
	if err != nil {
		_ = tx.Rollback(context.WithoutCancel(ctx))
		if errors.Is(err, pgx.ErrNoRows) {
			return nil, false, nil
		}
		return nil, false, unavailable("claim an outbox row", err)
	}
	return &outboxClaim{tx: tx, row: row}, true, nil
}

// outboxClaim is a row locked by ClaimOutbox's transaction.
type outboxClaim struct {
	tx   pgx.Tx
	row  halfmark.OutboxRow
	done bool
}

func (c *outboxClaim) Row() halfmark.OutboxRow { return c.row }

// Delivered implements halfmark.OutboxClaim.
func (c *outboxClaim) Delivered(ctx context.Context, at time.Time) error {
	return c.finish(ctx, "record a delivery",
		`UPDATE outbox SET delivered_at = $2, attempts = attempts + 1, last_error = NULL WHERE id = $1`, c.row.ID, at)
}

// Failed implements halfmark.OutboxClaim.
func (c *outboxClaim) Failed(ctx context.Context, next time.Time, lastError string) error {
	return c.finish(ctx, "record a failed delivery",
		`UPDATE outbox SET attempts = attempts + 1, next_attempt_at = $2, last_error = $3 WHERE id = $1`, c.row.ID, next, lastError)
}

func (c *outboxClaim) finish(ctx context.Context, what, sql string, args ...any) error {
	if c.done {
		return fmt.Errorf("outbox row %d: the claim was already released", c.row.ID)
	}
	c.done = true
	if _, err := c.tx.Exec(ctx, sql, args...); err != nil {
		_ = c.tx.Rollback(context.WithoutCancel(ctx))
		return unavailable(what, err)
	}
	if err := c.tx.Commit(ctx); err != nil {
		return unavailable(what, err)
	}
	return nil
}

// Release implements halfmark.OutboxClaim.
func (c *outboxClaim) Release(ctx context.Context) {
	if c.done {
		return
	}
	c.done = true
	_ = c.tx.Rollback(context.WithoutCancel(ctx))
}

// OutboxRows lists the outbox, oldest first, at most limit rows (0: all):
// what is queued, delivered or failing, for operators and tests.
func (d *DB) OutboxRows(ctx context.Context, limit int) ([]halfmark.OutboxRow, error) {
	q := `SELECT ` + outboxCols + ` FROM outbox ORDER BY id`
	var args []any
	if limit > 0 {
		q += ` LIMIT $1`
		args = append(args, limit)
	}
	rows, err := d.Pool.Query(ctx, q, args...)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.OutboxRow, error) { return scanOutbox(r) })
	return out, mapErr(err)
}

func unavailable(what string, err error) error {
	return &halfmark.Error{Code: halfmark.EUnavailable,
		Message: "notification outbox: could not " + what + " (" + err.Error() + "); retry shortly", Err: err}
}

var _ halfmark.OutboxStore = (*DB)(nil)
var _ halfmark.DigestStore = (*DB)(nil)
