package db

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/stdlib"
	"github.com/pressly/goose/v3"

	"halfmark/migrations"
)

// DefaultAppRole is the runtime role the service connects as: it owns
// nothing and holds only the grants of halfmark_grant_runtime
// (migrations/00007_roles.sql).
const DefaultAppRole = "halfmark_app"

// MigrateOptions say which runtime role `migrate` prepares.
type MigrateOptions struct {
	// AppRole is created when missing (LOGIN, no other attribute) and
	// given the service's grants; "" means DefaultAppRole.
	AppRole string
	// AppPassword, when not empty, becomes the runtime role's password.
	AppPassword string
}

// MigrateWith applies every pending migration as the owner (the user of
// url), then creates the runtime role if missing and grants it what the
// service needs. Connected as a role that owns no table and is no
// superuser (the runtime role itself), it changes nothing and fails only
// when a migration is pending, saying to run migrate with the owner's URL.
func MigrateWith(ctx context.Context, url string, o MigrateOptions, log io.Writer) error {
	if o.AppRole == "" {
		o.AppRole = DefaultAppRole
	}
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		return fmt.Errorf("database URL: %w", err)
	}
	sqlDB := stdlib.OpenDB(*cfg)
	defer sqlDB.Close()
	var super, owner bool
	err = sqlDB.QueryRowContext(ctx, `SELECT r.rolsuper,
		coalesce((SELECT pg_has_role(current_user, c.relowner, 'USAGE') FROM pg_class c
		          WHERE c.relname = 'checks' AND c.relnamespace = 'public'::regnamespace), true)
		FROM pg_roles r WHERE r.rolname = current_user`).Scan(&super, &owner)
	if err != nil {
		return mapErr(fmt.Errorf("look up the database role: %w", err))
	}
	if !super && !owner {
		return checkNothingPending(ctx, sqlDB)
	}
	if err := migrateDB(ctx, sqlDB, log); err != nil {
		return err
	}
	return grantRuntime(ctx, cfg, o)
}

// checkNothingPending fails when the schema is behind this binary.
func checkNothingPending(ctx context.Context, sqlDB *sql.DB) error {
	p, err := goose.NewProvider(goose.DialectPostgres, sqlDB, migrations.FS, goose.WithLogger(goose.NopLogger()))
	if err != nil {
		return fmt.Errorf("load migrations: %w", err)
	}
	pending, err := p.HasPending(ctx)
	if err != nil {
		return fmt.Errorf("read the schema version: %w", err)
	}
	if pending {
		return errors.New("the database schema is older than this program and this role does not own it: run `halfmark migrate --database-url OWNER_URL` with the owner's URL, then start again")
	}
	return nil
}

// grantRuntime creates the runtime role when missing, sets its password
// when one is given, and runs halfmark_grant_runtime, under a transaction
// lock so that two processes migrating at once do not collide.
func grantRuntime(ctx context.Context, cfg *pgx.ConnConfig, o MigrateOptions) error {
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		return mapErr(err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	var exists bool
	if err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = $1)`, o.AppRole).Scan(&exists); err != nil {
		return mapErr(err)
	}
	if !exists {
		_, err := conn.Exec(ctx, "CREATE ROLE "+pgx.Identifier{o.AppRole}.Sanitize()+
			" LOGIN NOSUPERUSER NOCREATEDB NOCREATEROLE NOREPLICATION NOBYPASSRLS")
		var pe *pgconn.PgError
		switch {
		case err == nil:
		case errors.As(err, &pe) && (pe.Code == "42710" || pe.Code == "23505"): // made by a concurrent migrate
		case errors.As(err, &pe) && pe.Code == "42501":
			return fmt.Errorf("the runtime role %q does not exist and this user may not create roles: create it (CREATE ROLE %s LOGIN PASSWORD '…') or migrate as a user with CREATEROLE", o.AppRole, o.AppRole)
		default:
			return fmt.Errorf("create the runtime role %q: %w", o.AppRole, err)
		}
	}
	var err2 error
	for attempt := 0; attempt < 5; attempt++ {
		// A role is shared by every database of the cluster: migrations of
		// two databases at once may both set its password, and PostgreSQL
		// refuses the second with "tuple concurrently updated". Try again.
		if err2 = grantOnce(ctx, conn, o); err2 == nil || !strings.Contains(err2.Error(), "concurrently") {
			return err2
		}
		time.Sleep(time.Duration(attempt+1) * 50 * time.Millisecond)
	}
	return err2
}

func grantOnce(ctx context.Context, conn *pgx.Conn, o MigrateOptions) error {
	return pgx.BeginFunc(ctx, conn, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtext('halfmark_grant_runtime'))`); err != nil {
			return err
		}
		if o.AppPassword != "" {
			var stmt string
			if err := tx.QueryRow(ctx, `SELECT format('ALTER ROLE %I PASSWORD %L', $1::text, $2::text)`, o.AppRole, o.AppPassword).Scan(&stmt); err != nil {
				return err
			}
			if _, err := tx.Exec(ctx, stmt); err != nil {
				return fmt.Errorf("set the runtime role's password: %w", err)
			}
		}
		var stmt string
		if err := tx.QueryRow(ctx, `SELECT format('GRANT CONNECT ON DATABASE %I TO %I', current_database(), $1::text)`, o.AppRole).Scan(&stmt); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `SELECT halfmark_grant_runtime($1)`, o.AppRole); err != nil {
			return fmt.Errorf("grant the runtime role %q: %w", o.AppRole, err)
		}
		return nil
	})
}

// RoleInfo says which database role a connection uses and whether the
// append-only triggers bind it.
type RoleInfo struct {
	Name      string
	Superuser bool
	Owner     bool // owns the tables
}

// Role reports the role of the pool's connections.
func (d *DB) Role(ctx context.Context) (RoleInfo, error) {
	var r RoleInfo
	err := d.Pool.QueryRow(ctx, `SELECT current_user, r.rolsuper,
		coalesce((SELECT pg_has_role(current_user, c.relowner, 'USAGE') FROM pg_class c
		          WHERE c.relname = 'checks' AND c.relnamespace = 'public'::regnamespace), false)
		FROM pg_roles r WHERE r.rolname = current_user`).Scan(&r.Name, &r.Superuser, &r.Owner)
	return r, mapErr(err)
}

// Warning is "" for a runtime role, and otherwise says plainly that the
// append-only triggers do not bind this role.
func (r RoleInfo) Warning() string {
	switch {
	case r.Superuser:
		return fmt.Sprintf("append-only not enforced against this role: %q is a superuser, which can disable the triggers; connect as the runtime role (%s)", r.Name, DefaultAppRole)
	case r.Owner:
		return fmt.Sprintf("append-only not enforced against this role: %q owns the tables and can disable or drop the triggers; connect as the runtime role (%s)", r.Name, DefaultAppRole)
	}
	return ""
}
