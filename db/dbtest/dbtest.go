// Package dbtest gives each test its own throw-away PostgreSQL database.
//
// With HALFMARK_TEST_DATABASE_URL set (for example
// postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable) the databases
// are created on that server; the URL's role must be allowed to CREATE
// DATABASE, and the server must be PostgreSQL 13 or newer (DROP DATABASE ...
// WITH (FORCE)). Otherwise one private cluster per test binary is started
// with the installed PostgreSQL binaries (see localpg) in a temporary
// directory. When neither is available New fails the test; it never skips,
// because tests of database code must run against a real server.
//
// A package that uses dbtest must run its tests through Main, which stops
// the private cluster and removes its directory afterwards:
//
//	func TestMain(m *testing.M) { dbtest.Main(m) }
package dbtest

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"net/url"
	"os"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// EnvURL names the environment variable holding the URL of an existing
// server (any database on it) to create the test databases on.
const EnvURL = "HALFMARK_TEST_DATABASE_URL"

// NamePrefix starts the name of every database New creates.
const NamePrefix = "halfmark_test_"

var mainRunning atomic.Bool

// Main runs the package's tests, then stops the shared private cluster (if
// one was started) and removes its directory, and exits with the tests'
// status. Call it from TestMain.
func Main(m *testing.M) {
	mainRunning.Store(true)
	code := m.Run()
	if err := stopShared(); err != nil {
		fmt.Fprintln(os.Stderr, "dbtest:", err)
		if code == 0 {
			code = 1
		}
	}
	os.Exit(code)
}

// New creates an empty database named halfmark_test_<16 hex digits> and
// returns its URL; the database is dropped, with any sessions still open on
// it, when the test and its subtests finish. It fails the test when no
// server is available.
func New(t testing.TB) (url string) {
	t.Helper()
	u, err := newDatabase(t)
	if err != nil {
		t.Fatalf("dbtest: %v", err)
	}
	return u
}

func newDatabase(t testing.TB) (string, error) {
	admin, err := adminURL()
	if err != nil {
		return "", err
	}
	var b [8]byte
	rand.Read(b[:])
	name := NamePrefix + hex.EncodeToString(b[:])
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := execAdmin(ctx, admin, "CREATE DATABASE "+pgx.Identifier{name}.Sanitize()); err != nil {
		return "", fmt.Errorf("create database %s: %w", name, err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		if err := execAdmin(ctx, admin, "DROP DATABASE IF EXISTS "+pgx.Identifier{name}.Sanitize()+" WITH (FORCE)"); err != nil {
			t.Errorf("dbtest: drop database %s: %v", name, err)
		}
	})
	return withDatabase(admin, name)
}

// adminURL is the server to create databases on: $HALFMARK_TEST_DATABASE_URL
// or the shared private cluster.
func adminURL() (string, error) {
	if u := os.Getenv(EnvURL); u != "" {
		if _, err := withDatabase(u, "postgres"); err != nil {
			return "", err
		}
		return u, nil
	}
	if !mainRunning.Load() {
		return "", errors.New("no " + EnvURL + " is set, so a private PostgreSQL cluster is needed; call dbtest.Main(m) from TestMain in this package so it is stopped and removed after the tests")
	}
	c, err := sharedCluster()
	if err != nil {
		return "", err
	}
	return c.URL("postgres"), nil
}

// withDatabase replaces the database in a postgres:// URL, keeping the
// host, credentials and query parameters.
func withDatabase(serverURL, name string) (string, error) {
	u, err := url.Parse(serverURL)
	if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") {
		return "", fmt.Errorf("%s must be a postgres:// URL such as postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable", EnvURL)
	}
	u.Path, u.RawPath = "/"+name, ""
	return u.String(), nil
}

func execAdmin(ctx context.Context, connURL, sql string) error {
	conn, err := pgx.Connect(ctx, connURL)
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	_, err = conn.Exec(ctx, sql)
	return err
}
