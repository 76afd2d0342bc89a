package db

import (
	"context"
	"strconv"
	"time"
)

// ChecksChannel is the PostgreSQL notification channel on which every
// transaction that stores checks announces their machines (payload: the
// machine id), so that a worker evaluates them within moments instead of at
// its next scheduled run.
const ChecksChannel = "halfmark_checks"

// ListenChecks calls fn with the machine id of every check stored by any
// process, until ctx ends. It holds one connection of the pool and
// reconnects after a connection loss (the scheduled evaluation remains the
// safety net for what is stored meanwhile).
func (d *DB) ListenChecks(ctx context.Context, fn func(machineID int64)) error {
	for ctx.Err() == nil {
		if err := d.listenOnce(ctx, fn); err != nil && ctx.Err() == nil {
			select {
			case <-ctx.Done():
			case <-time.After(time.Second):
			}
		}
	}
	return nil
}

func (d *DB) listenOnce(ctx context.Context, fn func(int64)) error {
	conn, err := d.Pool.Acquire(ctx)
	if err != nil {
		return err
	}
	defer func() {
		// A connection that listened goes back to the pool clean.
		uctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		if _, err := conn.Exec(uctx, "UNLISTEN *"); err != nil {
			conn.Conn().Close(uctx)
		}
		conn.Release()
	}()
	if _, err := conn.Exec(ctx, "LISTEN "+ChecksChannel); err != nil {
		return err
	}
	for {
		n, err := conn.Conn().WaitForNotification(ctx)
		if err != nil {
			return err
		}
		if id, err := strconv.ParseInt(n.Payload, 10, 64); err == nil {
			fn(id)
		}
	}
}
