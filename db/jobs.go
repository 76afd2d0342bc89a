package db

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"
)

// ClaimSlot claims one scheduled tick (job, slot) for worker and runs fn
// once if the claim succeeds. Two workers never run the same tick: a
// transaction-scoped advisory lock on the job name serialises the claim,
// and the job_runs row keyed by (job, slot) records it, so a worker that
// comes later for the same slot finds the row and skips. ran is false when
// another worker had the slot. fn runs outside the claim transaction; its
// error is recorded in job_runs.result.
func (d *DB) ClaimSlot(ctx context.Context, job string, slot time.Time, worker string, fn func(context.Context) (string, error)) (ran bool, err error) {
	var id int64
	err = d.tx(ctx, func(tx pgx.Tx) error {
		var locked bool
		if err := tx.QueryRow(ctx, `SELECT pg_try_advisory_xact_lock(hashtextextended($1, 0))`, job).Scan(&locked); err != nil {
			return err
		}
		if !locked {
			return nil
		}
		err := tx.QueryRow(ctx, `INSERT INTO job_runs (job, slot, worker) VALUES ($1, $2, $3)
			ON CONFLICT (job, slot) DO NOTHING RETURNING id`, job, slot.UTC(), worker).Scan(&id)
		if err == pgx.ErrNoRows {
			return nil
		}
		return err
	})
	if err != nil || id == 0 {
		return false, err
	}
	result, ferr := fn(ctx)
	if ferr != nil {
		result = "error: " + ferr.Error()
	}
	_, err = d.Pool.Exec(context.WithoutCancel(ctx), `UPDATE job_runs SET finished_at = clock_timestamp(), result = $2 WHERE id = $1`, id, result)
	if ferr != nil {
		return true, ferr
	}
	return true, mapErr(err)
}
