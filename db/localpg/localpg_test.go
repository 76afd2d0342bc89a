package localpg

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// Helper-process modes: the test binary re-executes itself to act as a
// second program using the same data directory.
const (
	helperDirEnv  = "HALFMARK_LOCALPG_HELPER_DIR"
	helperModeEnv = "HALFMARK_LOCALPG_HELPER_MODE"
)

func TestMain(m *testing.M) {
	if dir := os.Getenv(helperDirEnv); dir != "" {
		os.Exit(helperMain(dir, os.Getenv(helperModeEnv)))
	}
	os.Exit(m.Run())
}

// helperMain opens the cluster in dir and prints "owned=<bool> port=<n>
// pid=<postmaster pid>". In mode "open" it exits without stopping the server;
// in mode "hold" it waits to be killed.
func helperMain(dir, mode string) int {
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	opts := []Option{withNoSync()}
	if mode == "hold" {
		opts = []Option{Throwaway()}
	}
	c, err := Open(ctx, dir, os.Stderr, opts...)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	pf, err := readPIDFile(c.pgdata)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	fmt.Printf("owned=%t port=%d pid=%d\n", c.Owned(), c.Port, pf.pid)
	if mode == "hold" {
		select {}
	}
	return 0
}

type logWriter struct{ t testing.TB }

func (w logWriter) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimRight(string(p), "\n"))
	return len(p), nil
}

// testDir is a fresh directory the postgres OS user can enter when the
// tests run as root (t.TempDir and its parent are 0700; the ACL path has its
// own test).
func testDir(t *testing.T) string {
	dir := t.TempDir()
	if os.Geteuid() == 0 {
		for _, d := range []string{dir, filepath.Dir(dir)} {
			if err := os.Chmod(d, 0o711); err != nil {
				t.Fatal(err)
			}
		}
	}
	return dir
}

func testContext(t *testing.T) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

// mustOpen opens dir and makes sure no server is left running on it when
// the test ends, whoever started it.
func mustOpen(t *testing.T, ctx context.Context, dir string, opts ...Option) *Cluster {
	t.Helper()
	c, err := Open(ctx, dir, logWriter{t}, opts...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if _, err := readPIDFile(c.pgdata); err == nil {
			if err := c.shutdown(context.Background()); err != nil {
				t.Errorf("cleanup: %v", err)
			}
		}
	})
	return c
}

func mustConnect(t *testing.T, ctx context.Context, url string) *pgx.Conn {
	t.Helper()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	return conn
}

// deadPID returns the number of a process that has exited and been reaped.
func deadPID(t *testing.T) int {
	cmd := exec.Command("true")
	if err := cmd.Run(); err != nil {
		t.Fatal(err)
	}
	return cmd.Process.Pid
}

// writePIDFile rewrites postmaster.pid as a server that died would have
// left it, with pid in its first line.
func writePIDFile(t *testing.T, pgdata, saved string, pid int) {
	t.Helper()
	lines := strings.SplitN(saved, "\n", 2)
	content := strconv.Itoa(pid) + "\n" + lines[1]
	if err := os.WriteFile(filepath.Join(pgdata, pidFileName), []byte(content), 0o600); err != nil {
		t.Fatal(err)
	}
}

// The error text is the one the operator-facing specification requires.
func TestFindBinariesNotFoundMessage(t *testing.T) {
	t.Setenv(EnvBinDir, filepath.Join(t.TempDir(), "nowhere"))
	const want = "PostgreSQL server binaries (initdb, pg_ctl) were not found; install PostgreSQL (e.g. `apt-get install postgresql`) or set HALFMARK_DATABASE_URL to an existing database"
	_, err := FindBinaries()
	if err == nil || err.Error() != want {
		t.Fatalf("FindBinaries() error = %v, want %q", err, want)
	}
	_, err = Open(testContext(t), t.TempDir(), nil)
	if !errors.Is(err, ErrBinariesNotFound) {
		t.Fatalf("Open error = %v, want ErrBinariesNotFound", err)
	}
}

func TestFindBinariesSearchOrder(t *testing.T) {
	root := t.TempDir()
	makeTools := func(dir string, tools ...string) string {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for _, tool := range tools {
			if err := os.WriteFile(filepath.Join(dir, tool), []byte("#!/bin/sh\n"), 0o755); err != nil {
				t.Fatal(err)
			}
		}
		return dir
	}
	deb := filepath.Join(root, "lib")
	makeTools(filepath.Join(deb, "9.6", "bin"), serverTools...)
	v10 := makeTools(filepath.Join(deb, "10", "bin"), serverTools...)
	makeTools(filepath.Join(deb, "16", "bin"), "initdb", "postgres") // no pg_ctl
	makeTools(filepath.Join(deb, "beta", "bin"), serverTools...)     // not a version
	fixed := filepath.Join(root, "local", "bin")
	onPath := makeTools(filepath.Join(root, "path"), serverTools...)
	lookPath := func(name string) (string, error) { return filepath.Join(onPath, name), nil }
	noPath := func(name string) (string, error) { return "", exec.ErrNotFound }

	// PostgreSQL 10 and later number majors with one integer, so 10 is newer
	// than 9.6 (PostgreSQL versioning policy, common practice).
	if got, err := findBinaries("", deb, fixed, lookPath); err != nil || got != v10 {
		t.Errorf("debian layout: got %q, %v; want %q", got, err, v10)
	}
	envDir := makeTools(filepath.Join(root, "env"), serverTools...)
	if got, err := findBinaries(envDir, deb, fixed, lookPath); err != nil || got != envDir {
		t.Errorf("env dir: got %q, %v; want %q", got, err, envDir)
	}
	if _, err := findBinaries(filepath.Join(root, "lib", "16", "bin"), deb, fixed, lookPath); !errors.Is(err, ErrBinariesNotFound) {
		t.Errorf("incomplete env dir must not fall back to other places: got %v", err)
	}
	empty := filepath.Join(root, "none")
	makeTools(fixed, serverTools...)
	if got, err := findBinaries("", empty, fixed, lookPath); err != nil || got != fixed {
		t.Errorf("source build dir: got %q, %v; want %q", got, err, fixed)
	}
	if got, err := findBinaries("", empty, empty, lookPath); err != nil || got != onPath {
		t.Errorf("PATH: got %q, %v; want %q", got, err, onPath)
	}
	if _, err := findBinaries("", empty, empty, noPath); !errors.Is(err, ErrBinariesNotFound) {
		t.Errorf("nothing installed: got %v, want ErrBinariesNotFound", err)
	}
}

func TestOpenRejectsUnusablePaths(t *testing.T) {
	ctx := testContext(t)
	if _, err := Open(ctx, "", nil); err == nil {
		t.Error("Open(\"\") succeeded")
	}
	bad := filepath.Join(t.TempDir(), "cost$HOME")
	if _, err := Open(ctx, bad, nil); err == nil || !strings.Contains(err.Error(), "cannot pass to its shell") {
		t.Errorf("Open(%q) error = %v", bad, err)
	}
	// A directory with files but no PG_VERSION is not a cluster: never initdb over it.
	dir := testDir(t)
	if err := os.MkdirAll(filepath.Join(dir, "pgdata"), 0o700); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "pgdata", "notes.txt"), []byte("x"), 0o600); err != nil {
		t.Fatal(err)
	}
	if os.Geteuid() == 0 {
		u, err := user.Lookup(serverUser)
		if err != nil {
			t.Fatal(err)
		}
		uid, _ := strconv.Atoi(u.Uid)
		gid, _ := strconv.Atoi(u.Gid)
		os.Chown(filepath.Join(dir, "pgdata"), uid, gid)
	}
	if _, err := Open(ctx, dir, nil); err == nil || !strings.Contains(err.Error(), "no PG_VERSION") {
		t.Errorf("Open over a foreign directory: error = %v", err)
	}
}

func TestURLParsesAsPgxConfig(t *testing.T) {
	cfg, err := pgx.ParseConfig(clusterURL(54321, "halfmark"))
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Host != "127.0.0.1" || cfg.Port != 54321 || cfg.User != "postgres" || cfg.Database != "halfmark" || cfg.TLSConfig != nil {
		t.Errorf("parsed %+v", cfg.Config)
	}
}

// TestLifecycle walks one cluster through first start, joining, restart
// with data kept, and restarts over stale lock files.
func TestLifecycle(t *testing.T) {
	ctx := testContext(t)
	dir := testDir(t)
	c := mustOpen(t, ctx, dir, withNoSync())
	if !c.Owned() {
		t.Fatal("first Open did not start the server")
	}
	if c.Port == 5432 || c.Port <= 0 {
		t.Fatalf("port %d", c.Port)
	}
	conn := mustConnect(t, ctx, c.URL("postgres"))
	var listen, encoding, collate, dataDir string
	err := conn.QueryRow(ctx, `SELECT current_setting('listen_addresses'), current_setting('server_encoding'),
		datcollate, current_setting('data_directory') FROM pg_database WHERE datname = current_database()`).
		Scan(&listen, &encoding, &collate, &dataDir)
	if err != nil {
		t.Fatal(err)
	}
	if listen != "127.0.0.1" || encoding != "UTF8" || collate != "C" || dataDir != c.pgdata {
		t.Errorf("listen_addresses=%q encoding=%q collate=%q data_directory=%q", listen, encoding, collate, dataDir)
	}
	conn.Close(ctx)
	if os.Geteuid() == 0 {
		u, err := user.Lookup(serverUser)
		if err != nil {
			t.Fatal(err)
		}
		fi, err := os.Stat(c.pgdata)
		if err != nil {
			t.Fatal(err)
		}
		if got := strconv.Itoa(int(fi.Sys().(*syscall.Stat_t).Uid)); got != u.Uid {
			t.Errorf("pgdata owned by uid %s, want %s (%s)", got, u.Uid, serverUser)
		}
	}

	// EnsureDatabase is idempotent and safe when callers race.
	var wg sync.WaitGroup
	errs := make([]error, 4)
	for i := range errs {
		wg.Go(func() { errs[i] = c.EnsureDatabase(ctx, "halfmark_it") })
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		t.Fatal(err)
	}
	if err := c.EnsureDatabase(ctx, "halfmark_it"); err != nil {
		t.Fatal(err)
	}

	// A second Open joins the running server and cannot stop it.
	joined := mustOpen(t, ctx, dir, withNoSync())
	if joined.Owned() || joined.Port != c.Port {
		t.Fatalf("second Open: owned=%t port=%d, want joined on %d", joined.Owned(), joined.Port, c.Port)
	}
	if err := joined.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	conn = mustConnect(t, ctx, c.URL("halfmark_it"))
	if _, err := conn.Exec(ctx, `CREATE TABLE edge (x1_mm double precision); INSERT INTO edge VALUES (-50.25)`); err != nil {
		t.Fatal(err)
	}
	conn.Close(ctx)

	// Stop, then Open again: same data, same port (from halfmark-port).
	if err := c.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if err := c.Stop(ctx); err != nil {
		t.Fatalf("second Stop: %v", err)
	}
	if _, err := readPIDFile(c.pgdata); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("postmaster.pid after Stop: %v", err)
	}
	if err := ping(ctx, c.URL("postgres")); err == nil {
		t.Fatal("server still answers after Stop")
	}
	checkEdge := func(c *Cluster) {
		t.Helper()
		conn := mustConnect(t, ctx, c.URL("halfmark_it"))
		var x1 float64
		if err := conn.QueryRow(ctx, "SELECT x1_mm FROM edge").Scan(&x1); err != nil || x1 != -50.25 {
			t.Fatalf("after restart: x1_mm=%v err=%v, want -50.25", x1, err)
		}
		conn.Close(ctx)
	}
	c2 := mustOpen(t, ctx, dir, withNoSync())
	if !c2.Owned() || c2.Port != c.Port {
		t.Fatalf("reopen: owned=%t port=%d, want owned on %d", c2.Owned(), c2.Port, c.Port)
	}
	checkEdge(c2)

	// A postmaster.pid left by a server that died (its process is gone).
	saved, err := os.ReadFile(filepath.Join(c2.pgdata, pidFileName))
	if err != nil {
		t.Fatal(err)
	}
	if err := c2.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	writePIDFile(t, c2.pgdata, string(saved), deadPID(t))
	// Meanwhile another program took the recorded port: a new one is chosen.
	taken, err := net.Listen("tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(c2.Port)))
	if err != nil {
		t.Fatal(err)
	}
	defer taken.Close()
	c3 := mustOpen(t, ctx, dir, withNoSync())
	if !c3.Owned() {
		t.Fatal("Open over a stale postmaster.pid joined instead of starting")
	}
	if c3.Port == c2.Port {
		t.Fatalf("started on port %d, which another program holds", c3.Port)
	}
	checkEdge(c3)

	// A postmaster.pid whose process number now belongs to another live
	// process (this test), plus a socket lock file naming it.
	if err := c3.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	writePIDFile(t, c3.pgdata, string(saved), os.Getpid())
	if c3.socketDir != "" {
		lock := filepath.Join(c3.socketDir, fmt.Sprintf(".s.PGSQL.%d.lock", c3.Port))
		if err := os.WriteFile(lock, []byte(strconv.Itoa(os.Getpid())+"\n"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	c4 := mustOpen(t, ctx, dir, withNoSync())
	if !c4.Owned() {
		t.Fatal("Open over a postmaster.pid naming an unrelated live process joined instead of starting")
	}
	checkEdge(c4)
	if err := c4.Stop(ctx); err != nil {
		t.Fatal(err)
	}

	// A server that cannot start: the error carries the end of its log.
	conf := filepath.Join(c4.pgdata, "postgresql.conf")
	good, err := os.ReadFile(conf)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(conf, append(slices.Clip(good), "halfmark_no_such_setting = 1\n"...), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err = Open(ctx, dir, logWriter{t}, withNoSync())
	// Message text of PostgreSQL's guc-file.l for an unknown parameter.
	if err == nil || !strings.Contains(err.Error(), `unrecognized configuration parameter "halfmark_no_such_setting"`) {
		t.Fatalf("Open with a broken postgresql.conf: error = %v, want the log line naming the setting", err)
	}
	t.Logf("expected start failure: %v", err)
	if err := os.WriteFile(conf, good, 0o600); err != nil {
		t.Fatal(err)
	}
}

// TestConcurrentOpenProcesses runs two processes that Open the same new
// data directory at once: one must create and start the server, the other
// join it.
func TestConcurrentOpenProcesses(t *testing.T) {
	ctx := testContext(t)
	dir := testDir(t)
	var cmds [2]*exec.Cmd
	var outs [2]strings.Builder
	for i := range cmds {
		cmds[i] = exec.CommandContext(ctx, os.Args[0], "-test.run=^$")
		cmds[i].Env = append(os.Environ(), helperDirEnv+"="+dir, helperModeEnv+"=open")
		cmds[i].Stdout = &outs[i]
		cmds[i].Stderr = logWriter{t}
	}
	t.Cleanup(func() {
		if pf, err := readPIDFile(filepath.Join(dir, "pgdata")); err == nil {
			c := &Cluster{DataDir: dir, pgdata: filepath.Join(dir, "pgdata"), logw: logWriter{t}}
			var err error
			if c.bin, err = FindBinaries(); err == nil {
				c.run, err = chooseRunner(c.pgdata)
			}
			if err == nil {
				err = c.shutdown(context.Background())
			}
			if err != nil {
				t.Errorf("stop server pid %d: %v", pf.pid, err)
			}
		}
	})
	for _, cmd := range cmds {
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
	}
	owned := 0
	ports := map[string]bool{}
	for i, cmd := range cmds {
		if err := cmd.Wait(); err != nil {
			t.Fatalf("helper %d: %v", i, err)
		}
		var o bool
		var port, pid int
		if _, err := fmt.Sscanf(outs[i].String(), "owned=%t port=%d pid=%d", &o, &port, &pid); err != nil {
			t.Fatalf("helper %d printed %q: %v", i, outs[i].String(), err)
		}
		if o {
			owned++
		}
		ports[fmt.Sprint(port, "/", pid)] = true
	}
	if owned != 1 || len(ports) != 1 {
		t.Fatalf("owned by %d helpers, servers (port/pid) %v; want one owner and one server", owned, ports)
	}
	// PostgreSQL logs this line once per successful start (postmaster.c).
	logText, err := os.ReadFile(filepath.Join(dir, "postgres.log"))
	if err != nil {
		t.Fatal(err)
	}
	if n := strings.Count(string(logText), "database system is ready to accept connections"); n != 1 {
		t.Errorf("server log shows %d starts, want 1", n)
	}
	// The server outlives the helpers (pg_ctl detaches it); this process joins.
	c := mustOpen(t, ctx, dir, withNoSync())
	if c.Owned() {
		t.Error("Open after the helpers exited started a second server")
	}
}

// TestThrowawayUnderPrivateDir puts the data directory below directories
// only root may enter (like /root on Debian) and uses a Throwaway server,
// which must die with the process that started it.
func TestThrowawayUnderPrivateDir(t *testing.T) {
	ctx := testContext(t)
	private := filepath.Join(t.TempDir(), "private")
	if err := os.Mkdir(private, 0o700); err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(private, "home", "halfmark")
	c := mustOpen(t, ctx, dir, Throwaway())
	if !c.Owned() || c.child == nil {
		t.Fatalf("owned=%t child=%v", c.Owned(), c.child)
	}
	conn := mustConnect(t, ctx, c.URL("postgres"))
	var fsync string
	if err := conn.QueryRow(ctx, "SHOW fsync").Scan(&fsync); err != nil || fsync != "off" {
		t.Fatalf("fsync=%q err=%v", fsync, err)
	}
	conn.Close(ctx)

	if os.Geteuid() == 0 {
		fi, err := os.Stat(private)
		if err != nil {
			t.Fatal(err)
		}
		if fi.Mode().Perm()&0o007 != 0 {
			t.Errorf("%s mode %v: other users were given access", private, fi.Mode().Perm())
		}
		// The kernel is the judge: postgres may enter, an unrelated user may not.
		if !c.run.canEnter(c.bin, private) {
			t.Errorf("OS user %s cannot enter %s", c.run.name, private)
		}
		nobody := runner{cred: &syscall.Credential{Uid: 65534, Gid: 65534}, name: "nobody", home: "/"}
		if nobody.canEnter(c.bin, private) {
			t.Errorf("uid 65534 can enter %s", private)
		}
	} else {
		t.Log("not root: the postgres-user and ACL path is not exercised")
	}

	pid := c.child.Process.Pid
	if err := c.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Kill(pid, 0); !errors.Is(err, syscall.ESRCH) {
		t.Fatalf("postgres pid %d still exists after Stop: %v", pid, err)
	}

	// A helper process holds a Throwaway server on the same (initialised)
	// directory and is killed with SIGKILL: the server must go too.
	helper := exec.CommandContext(ctx, os.Args[0], "-test.run=^$")
	helper.Env = append(os.Environ(), helperDirEnv+"="+dir, helperModeEnv+"=hold")
	helper.Stderr = logWriter{t}
	stdout, err := helper.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := helper.Start(); err != nil {
		t.Fatal(err)
	}
	line, err := bufio.NewReader(stdout).ReadString('\n')
	if err != nil {
		helper.Process.Kill()
		helper.Wait()
		t.Fatalf("helper: %v", err)
	}
	var owned bool
	var port int
	if _, err := fmt.Sscanf(line, "owned=%t port=%d pid=%d", &owned, &port, &pid); err != nil || !owned {
		t.Fatalf("helper printed %q (%v)", line, err)
	}
	helper.Process.Kill()
	helper.Wait()
	deadline := time.Now().Add(15 * time.Second)
	for isPostmasterOf(pid, c.pgdata) {
		if time.Now().After(deadline) {
			t.Fatalf("postgres pid %d outlived its killed parent", pid)
		}
		time.Sleep(20 * time.Millisecond)
	}
}
