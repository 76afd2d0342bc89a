package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"strings"
	"time"

	"halfmark/db"
	"halfmark/db/localpg"
)

var errHelp = errors.New("help shown")

// newFlags makes a flag set whose defaults can come from HALFMARK_*
// environment variables (flag --data-dir ↔ HALFMARK_DATA_DIR).
func newFlags(e env, name, synopsis string) *flag.FlagSet {
	fs := flag.NewFlagSet("halfmark "+name, flag.ContinueOnError)
	fs.SetOutput(e.stderr)
	fs.Usage = func() { printUsage(e.stdout, fs, "Usage: halfmark "+synopsis) }
	return fs
}

// parseFlags applies environment defaults, then the command line.
func parseFlags(fs *flag.FlagSet, e env) error {
	var envErr error
	fs.VisitAll(func(f *flag.Flag) {
		key := "HALFMARK_" + strings.ToUpper(strings.ReplaceAll(f.Name, "-", "_"))
		if v := e.getenv(key); v != "" {
			if err := f.Value.Set(v); err != nil && envErr == nil {
				envErr = exitUsage{fmt.Errorf("%s=%q: %v", key, v, err)}
			}
		}
	})
	if envErr != nil {
		return envErr
	}
	if err := parseAnywhere(fs, e.args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return errHelp
		}
		return exitUsage{err}
	}
	return nil
}

// dbFlags are the flags of every command that needs the database.
type dbFlags struct {
	url         string
	dataDir     string
	appRole     string
	appPassword string // set by migrate only
	ownerURL    string // set by migrate only: the owner's URL
	migrating   bool   // migrate runs as the owner: no runtime-role check
}

func (d *dbFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&d.url, "database-url", "", "PostgreSQL URL (also DATABASE_URL); empty: a private local cluster under --data-dir")
	fs.StringVar(&d.dataDir, "data-dir", "./halfmark-data", "directory of the private local PostgreSQL cluster (used when no database URL is set)")
	fs.StringVar(&d.appRole, "app-role", db.DefaultAppRole, "database role the service runs as: owns nothing, holds only the grants it needs (migrate creates it)")
}

// requireRuntimeRoleEnv, set to 1, makes a service refuse to start when it
// connects as a superuser or as the owner of the tables.
const requireRuntimeRoleEnv = "HALFMARK_REQUIRE_RUNTIME_ROLE"

// store is an open database with what it takes to close it.
type store struct {
	*db.DB
	url     string
	cluster *localpg.Cluster
	// roleWarning is "" when the connection's role is bound by the
	// append-only triggers (see db.RoleInfo.Warning).
	roleWarning string
}

// Close closes the pool and stops a cluster this process started.
func (s *store) Close() {
	s.DB.Close()
	if s.cluster != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
		defer cancel()
		_ = s.cluster.Stop(ctx)
	}
}

// openStore connects to the configured database, or starts (or joins) the
// private local cluster, then applies migrations. The private cluster is
// migrated as its superuser and used as the runtime role (d.appRole, with
// the password kept beside the cluster). With a URL, migrations run only
// when its role owns the schema; a service connected as a superuser or owner
// is told so on progress, and refused when HALFMARK_REQUIRE_RUNTIME_ROLE=1.
func openStore(ctx context.Context, e env, d dbFlags, progress io.Writer) (*store, error) {
	url := d.url
	if d.ownerURL != "" {
		url = d.ownerURL
	}
	if url == "" {
		url = e.getenv("DATABASE_URL")
	}
	s := &store{}
	opts := db.MigrateOptions{AppRole: d.appRole, AppPassword: d.appPassword}
	appURL := url
	if url == "" {
		if progress != nil {
			fmt.Fprintf(progress, "no database URL set: using the private PostgreSQL cluster in %s\n", d.dataDir)
		}
		c, err := localpg.Open(ctx, d.dataDir, progress)
		if err != nil {
			return nil, err
		}
		if err := c.EnsureDatabase(ctx, "halfmark"); err != nil {
			_ = c.Stop(context.Background())
			return nil, err
		}
		s.cluster = c
		url = c.URL("halfmark")
		if opts.AppPassword, err = c.AppPassword(); err == nil {
			appURL, err = c.AppURL("halfmark", opts.AppRole)
		}
		if err != nil {
			s.stopCluster()
			return nil, err
		}
	}
	s.url = appURL
	if err := db.MigrateWith(ctx, url, opts, progress); err != nil {
		s.stopCluster()
		return nil, err
	}
	d2, err := db.Open(ctx, appURL)
	if err != nil {
		s.stopCluster()
		return nil, err
	}
	s.DB = d2
	role, err := d2.Role(ctx)
	if err != nil {
		s.Close()
		return nil, err
	}
	if s.roleWarning = role.Warning(); s.roleWarning != "" && !d.migrating {
		if e.getenv(requireRuntimeRoleEnv) == "1" {
			s.Close()
			return nil, fmt.Errorf("%s=1 and %s; set HALFMARK_DATABASE_URL to the runtime role's URL (run `halfmark migrate` with the owner's URL first)", requireRuntimeRoleEnv, s.roleWarning)
		}
		if progress != nil {
			fmt.Fprintf(progress, "warning: %s\n", s.roleWarning)
		}
	}
	return s, nil
}

func (s *store) stopCluster() {
	if s.cluster != nil {
		_ = s.cluster.Stop(context.Background())
	}
}

// logFlags choose the log format.
type logFlags struct {
	format string
	level  string
}

func (l *logFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&l.format, "log-format", "text", "log format: text or json")
	fs.StringVar(&l.level, "log-level", "info", "log level: debug, info, warn, error")
}

func (l logFlags) logger(w io.Writer) (*slog.Logger, error) {
	var lv slog.Level
	if err := lv.UnmarshalText([]byte(l.level)); err != nil {
		return nil, exitUsage{fmt.Errorf("--log-level %q: use debug, info, warn or error", l.level)}
	}
	o := &slog.HandlerOptions{Level: lv}
	switch l.format {
	case "text":
		return slog.New(slog.NewTextHandler(w, o)), nil
	case "json":
		return slog.New(slog.NewJSONHandler(w, o)), nil
	}
	return nil, exitUsage{fmt.Errorf("--log-format %q: use text or json", l.format)}
}
