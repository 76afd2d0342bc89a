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
	url     string
	dataDir string
}

func (d *dbFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&d.url, "database-url", "", "PostgreSQL URL (also DATABASE_URL); empty: a private local cluster under --data-dir")
	fs.StringVar(&d.dataDir, "data-dir", "./halfmark-data", "directory of the private local PostgreSQL cluster (used when no database URL is set)")
}

// store is an open database with what it takes to close it.
type store struct {
	*db.DB
	url     string
	cluster *localpg.Cluster
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
// private local cluster, then applies migrations.
func openStore(ctx context.Context, e env, d dbFlags, progress io.Writer) (*store, error) {
	url := d.url
	if url == "" {
		url = e.getenv("DATABASE_URL")
	}
	s := &store{}
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
	}
	s.url = url
	if err := db.Migrate(ctx, url, progress); err != nil {
		s.stopCluster()
		return nil, err
	}
	d2, err := db.Open(ctx, url)
	if err != nil {
		s.stopCluster()
		return nil, err
	}
	s.DB = d2
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
