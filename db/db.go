// Package db implements Halfmark's services on PostgreSQL with pgx v5.
// Every write runs in one transaction together with its audit row.
package db

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/pressly/goose/v3"
	"github.com/pressly/goose/v3/lock"

	"halfmark"
	"halfmark/migrations"
)

// DB is the PostgreSQL store. It implements the halfmark service
// interfaces.
type DB struct {
	Pool *pgxpool.Pool
	// Now is the clock (tests may replace it).
	Now func() time.Time
}

// Open connects to url and pings it.
func Open(ctx context.Context, url string) (*DB, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("database URL: %w", err)
	}
	if cfg.MaxConns < 8 {
		cfg.MaxConns = 8
	}
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("connect to the database: %w", err)
	}
	d := &DB{Pool: pool, Now: time.Now}
	pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if err := pool.Ping(pctx); err != nil {
		pool.Close()
		return nil, fmt.Errorf("reach the database (is PostgreSQL running, and is the URL right?): %w", err)
	}
	return d, nil
}

// Close releases the pool.
func (d *DB) Close() { d.Pool.Close() }

// Ping reports whether the database answers.
func (d *DB) Ping(ctx context.Context) error {
	if err := d.Pool.Ping(ctx); err != nil {
		return &halfmark.Error{Code: halfmark.EUnavailable, Message: "the database does not answer", Err: err}
	}
	return nil
}

// Migrate applies every pending migration and prepares the default runtime
// role (MigrateWith). A PostgreSQL session lock makes two processes
// migrating at once safe: the second waits, then finds nothing to do.
func Migrate(ctx context.Context, url string, log io.Writer) error {
	return MigrateWith(ctx, url, MigrateOptions{}, log)
}

func migrateDB(ctx context.Context, sqlDB *sql.DB, log io.Writer) error {
	locker, err := lock.NewPostgresSessionLocker()
	if err != nil {
		return err
	}
	p, err := goose.NewProvider(goose.DialectPostgres, sqlDB, migrations.FS,
		goose.WithSessionLocker(locker),
		goose.WithLogger(goose.NopLogger()))
	if err != nil {
		return fmt.Errorf("load migrations: %w", err)
	}
	res, err := p.Up(ctx)
	if err != nil {
		return fmt.Errorf("apply migrations: %w", err)
	}
	for _, r := range res {
		if log != nil {
			fmt.Fprintf(log, "applied migration %s (%s)\n", r.Source.Path, r.Duration.Round(time.Millisecond))
		}
	}
	return nil
}

// tx runs fn in a transaction, committing on nil.
func (d *DB) tx(ctx context.Context, fn func(pgx.Tx) error) error {
	err := pgx.BeginFunc(ctx, d.Pool, fn)
	return mapErr(err)
}

// mapErr turns database errors into domain errors with a code.
func mapErr(err error) error {
	if err == nil {
		return nil
	}
	var he *halfmark.Error
	if errors.As(err, &he) {
		return err
	}
	if errors.Is(err, pgx.ErrNoRows) {
		return &halfmark.Error{Code: halfmark.ENotFound, Message: "not found", Err: err}
	}
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		switch pe.Code {
		case "23505":
			return &halfmark.Error{Code: halfmark.EConflict, Message: "a record with the same key already exists", Err: err}
		case "23503":
			return &halfmark.Error{Code: halfmark.EInvalid, Message: "a referenced record does not exist", Err: err}
		case "22021", "22P05":
			// A NUL byte or a character the database encoding cannot hold
			// got past validation: the input's fault, never a 500.
			return &halfmark.Error{Code: halfmark.EInvalid, Message: "the text holds a character that cannot be stored (a NUL byte or invalid UTF-8); remove it", Err: err}
		case "42501":
			return &halfmark.Error{Code: halfmark.EForbidden, Message: pe.Message, Err: err}
		}
		if len(pe.Code) >= 2 && (pe.Code[:2] == "08" || pe.Code[:2] == "57") {
			return &halfmark.Error{Code: halfmark.EUnavailable, Message: "the database is not available; retry shortly", Err: err}
		}
		return err
	}
	if pgconn.SafeToRetry(err) || isConnErr(err) || halfmark.Unavailable(err) {
		return &halfmark.Error{Code: halfmark.EUnavailable, Message: "the database is not available; retry shortly", Err: err}
	}
	return err
}

func isConnErr(err error) bool {
	var ce *pgconn.ConnectError
	if errors.As(err, &ce) {
		return true
	}
	var ne interface{ Timeout() bool }
	return errors.As(err, &ne)
}

// audit appends one audit row inside tx.
func audit(ctx context.Context, tx pgx.Tx, a halfmark.Actor, action, entity, id string, detail any) error {
	_, err := tx.Exec(ctx, `INSERT INTO audit_log (actor, action, entity, entity_id, detail) VALUES ($1,$2,$3,$4,$5)`,
		a.Name, action, entity, id, detail)
	return err
}
