package localpg

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"time"
)

const portFileName = "halfmark-port"

// maxSocketDir keeps "<dir>/.s.PGSQL.NNNNN" within the 108-byte sun_path of
// a unix socket address (sys/un.h on Linux), with a margin.
const maxSocketDir = 100 - len("/.s.PGSQL.65535")

// socketDirFor is dataDir/socket, or "" (no unix sockets) when that path is
// too long for a socket address or holds characters that would need quoting
// in the unix_socket_directories list.
func socketDirFor(dataDir string) string {
	dir := filepath.Join(dataDir, "socket")
	if len(dir) > maxSocketDir || strings.ContainsAny(dir, ", '\"\\\t") {
		return ""
	}
	return dir
}

// join waits for a server that already runs on pgdata and adopts its port.
// It reports false when none runs, after removing the lock files of a dead
// one, and waits while one is starting up or shutting down.
func (c *Cluster) join(ctx context.Context) (bool, error) {
	deadline := time.Now().Add(startTimeout)
	var silentSince time.Time
	for {
		pf, err := readPIDFile(c.pgdata)
		switch {
		case errors.Is(err, fs.ErrNotExist):
			return false, nil
		case err != nil:
			// A server may be half-way through writing the file.
			if time.Now().After(deadline) {
				return false, fmt.Errorf("%w; if no server runs there, remove the file", err)
			}
		case pf.pid < 0:
			return false, fmt.Errorf("a single-user postgres (pid %d) is using %s; wait for it to finish", -pf.pid, c.pgdata)
		case !isPostmasterOf(pf.pid, c.pgdata):
			fmt.Fprintf(c.logw, "localpg: removing stale %s (process %d no longer runs the server)\n", filepath.Join(c.pgdata, pidFileName), pf.pid)
			if err := removeStaleLocks(c.pgdata, c.socketDir); err != nil {
				return false, fmt.Errorf("remove stale lock files: %w", err)
			}
			return false, nil
		case pf.port > 0 && (pf.status == "ready" || pf.status == "standby" || pf.status == ""):
			err := ping(ctx, c.superURL(pf.port, "postgres"))
			if err == nil {
				c.Port = pf.port
				fmt.Fprintf(c.logw, "localpg: joined the PostgreSQL server already running on 127.0.0.1:%d (pid %d)\n", pf.port, pf.pid)
				return true, nil
			}
			if silentSince.IsZero() {
				silentSince = time.Now()
			} else if time.Since(silentSince) > 5*time.Second {
				return false, fmt.Errorf("a PostgreSQL server (pid %d) runs in %s but does not answer on 127.0.0.1:%d (%v); stop it with `pg_ctl -D %s stop` or see %s", pf.pid, c.pgdata, pf.port, err, c.pgdata, c.logPath)
			}
		}
		if err == nil && time.Now().After(deadline) {
			return false, fmt.Errorf("the PostgreSQL server (pid %d) in %s is still %q after %v; see %s", pf.pid, c.pgdata, pf.status, startTimeout, c.logPath)
		}
		select {
		case <-ctx.Done():
			return false, ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// initIfNeeded runs initdb unless pgdata already holds a cluster. initdb
// writes into pgdata.initdb, renamed to pgdata only on success, so an
// interrupted initdb never leaves a half-made cluster behind.
func (c *Cluster) initIfNeeded(ctx context.Context) error {
	if _, err := os.Stat(filepath.Join(c.pgdata, "PG_VERSION")); err == nil {
		return nil
	}
	if entries, err := os.ReadDir(c.pgdata); err == nil && len(entries) > 0 {
		return fmt.Errorf("%s exists but holds no PostgreSQL cluster (no PG_VERSION); remove it or choose another data directory", c.pgdata)
	}
	tmp := c.pgdata + ".initdb"
	if err := os.RemoveAll(tmp); err != nil {
		return err
	}
	if err := os.Mkdir(tmp, 0o700); err != nil {
		return err
	}
	if err := c.run.chown(tmp); err != nil {
		return err
	}
	pwfile, err := c.initPasswordFile()
	if err != nil {
		return err
	}
	defer os.Remove(pwfile)
	args := []string{"-D", tmp, "-U", Superuser, "--auth=scram-sha-256", "--pwfile=" + pwfile, "-E", "UTF8", "--locale=C"}
	if c.opts.noSync {
		args = append(args, "--no-sync")
	}
	fmt.Fprintf(c.logw, "localpg: creating a PostgreSQL cluster in %s\n", c.pgdata)
	out, err := c.run.command(ctx, c.DataDir, filepath.Join(c.bin, "initdb"), args...).CombinedOutput()
	if err != nil {
		os.RemoveAll(tmp)
		return fmt.Errorf("initdb failed (%v):\n%s", err, lastLines(out, 20))
	}
	if err := os.Remove(c.pgdata); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	return os.Rename(tmp, c.pgdata)
}

// start launches the server on a free port; if another program takes the
// port between choosing and binding it, it tries a new one (three tries).
func (c *Cluster) start(ctx context.Context) error {
	if c.socketDir != "" {
		if err := os.Mkdir(c.socketDir, 0o700); err != nil && !errors.Is(err, fs.ErrExist) {
			return err
		}
		if err := c.run.chown(c.socketDir); err != nil {
			return err
		}
	} else {
		fmt.Fprintf(c.logw, "localpg: unix sockets are off because %s is too long or needs quoting; connect over TCP\n", filepath.Join(c.DataDir, "socket"))
	}
	f, err := os.OpenFile(c.logPath, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o600)
	if err != nil {
		return err
	}
	f.Close()
	if err := c.run.chown(c.logPath); err != nil {
		return err
	}
	if err := c.run.chownTree(c.pgdata); err != nil {
		return fmt.Errorf("give %s to OS user %s: %w", c.pgdata, c.run.name, err)
	}
	port, err := c.choosePort()
	if err != nil {
		return err
	}
	for attempt := 1; ; attempt++ {
		offset := fileSize(c.logPath)
		err := c.launch(ctx, port)
		if err == nil {
			break
		}
		tail := logTail(c.logPath, offset)
		if attempt < 3 && (strings.Contains(tail, "could not bind") || strings.Contains(tail, "already in use")) {
			if port, err = freePort(); err != nil {
				return err
			}
			continue
		}
		return fmt.Errorf("%w\nlast lines of %s:\n%s", err, c.logPath, tail)
	}
	c.Port, c.owned = port, true
	if err := os.WriteFile(filepath.Join(c.DataDir, portFileName), []byte(strconv.Itoa(port)+"\n"), 0o644); err != nil {
		fmt.Fprintf(c.logw, "localpg: could not record the port: %v\n", err)
	}
	fmt.Fprintf(c.logw, "localpg: started PostgreSQL on 127.0.0.1:%d (data %s, log %s)\n", port, c.pgdata, c.logPath)
	return nil
}

// serverArgs are the postgres options for a start on port.
func (c *Cluster) serverArgs(port int) []string {
	args := []string{
		"-p", strconv.Itoa(port),
		"-c", "listen_addresses=127.0.0.1",
		"-c", "unix_socket_directories=" + c.socketDir,
	}
	if c.opts.noSync {
		args = append(args, "-c", "fsync=off", "-c", "synchronous_commit=off", "-c", "full_page_writes=off")
	}
	return args
}

// launch starts the server once: through pg_ctl (the server outlives this
// process) or, for a Throwaway cluster, as a child process.
func (c *Cluster) launch(ctx context.Context, port int) error {
	if c.opts.throwaway {
		return c.launchChild(ctx, port)
	}
	quoted := make([]string, 0, 8)
	for _, a := range c.serverArgs(port) {
		quoted = append(quoted, shellQuote(a))
	}
	out, err := c.run.command(ctx, c.DataDir, filepath.Join(c.bin, "pg_ctl"),
		"-D", c.pgdata, "-l", c.logPath, "-w", "-t", "60",
		"-o", strings.Join(quoted, " "), "start").CombinedOutput()
	if err != nil {
		return fmt.Errorf("pg_ctl start failed (%v): %s", err, strings.TrimSpace(string(out)))
	}
	return c.waitReady(ctx, port, nil)
}

// launchChild runs postgres as a child tied to this process's lifetime.
func (c *Cluster) launchChild(ctx context.Context, port int) error {
	logf, err := os.OpenFile(c.logPath, os.O_WRONLY|os.O_APPEND, 0)
	if err != nil {
		return err
	}
	defer logf.Close()
	args := append([]string{"-D", c.pgdata}, c.serverArgs(port)...)
	cmd := c.run.command(nil, c.DataDir, filepath.Join(c.bin, "postgres"), args...)
	cmd.Stdout, cmd.Stderr = logf, logf
	tieToParent(cmd)
	started := make(chan error, 1)
	done := make(chan struct{})
	go func() {
		defer close(done)
		// The parent-death signal follows the OS thread that forked the
		// child; keep this thread alive, and out of other goroutines' hands,
		// for as long as the server runs.
		runtime.LockOSThread()
		if err := cmd.Start(); err != nil {
			started <- err
			return
		}
		started <- nil
		cmd.Wait()
	}()
	if err := <-started; err != nil {
		return fmt.Errorf("start postgres: %w", err)
	}
	if err := c.waitReady(ctx, port, done); err != nil {
		cmd.Process.Signal(syscall.SIGQUIT)
		<-done
		return err
	}
	c.child, c.childDone = cmd, done
	return nil
}

// waitReady polls until the server answers on port; done, when not nil,
// closes if the server process exits first.
func (c *Cluster) waitReady(ctx context.Context, port int, done <-chan struct{}) error {
	deadline := time.Now().Add(startTimeout)
	connURL := c.superURL(port, "postgres")
	for {
		err := ping(ctx, connURL)
		if err == nil {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("PostgreSQL did not answer on 127.0.0.1:%d within %v: %v", port, startTimeout, err)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-done:
			return errors.New("postgres exited while starting")
		case <-time.After(25 * time.Millisecond):
		}
	}
}

// choosePort reuses the port of the previous start when it is still free,
// so URLs stay stable, and otherwise asks the kernel for a free one.
func (c *Cluster) choosePort() (int, error) {
	if b, err := os.ReadFile(filepath.Join(c.DataDir, portFileName)); err == nil {
		if p, err := strconv.Atoi(strings.TrimSpace(string(b))); err == nil && p > 1024 && p < 65536 && p != 5432 && portFree(p) {
			return p, nil
		}
	}
	return freePort()
}

func portFree(port int) bool {
	l, err := net.Listen("tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(port)))
	if err != nil {
		return false
	}
	l.Close()
	return true
}

// freePort binds 127.0.0.1:0 and releases the port the kernel picked (from
// the ephemeral range, so never 5432).
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("find a free TCP port on 127.0.0.1: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// shellQuote quotes s for /bin/sh, which pg_ctl uses to run postgres with
// the -o options.
func shellQuote(s string) string {
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

func fileSize(path string) int64 {
	fi, err := os.Stat(path)
	if err != nil {
		return 0
	}
	return fi.Size()
}

// logTail returns the last lines written to path after offset.
func logTail(path string, offset int64) string {
	f, err := os.Open(path)
	if err != nil {
		return "(no log: " + err.Error() + ")"
	}
	defer f.Close()
	const maxTail = 16 << 10
	if size := fileSize(path); size-offset > maxTail {
		offset = size - maxTail
	}
	if _, err := f.Seek(offset, io.SeekStart); err != nil {
		return ""
	}
	b, _ := io.ReadAll(f)
	return lastLines(b, 30)
}

// lastLines returns at most n final lines of b.
func lastLines(b []byte, n int) string {
	b = bytes.TrimRight(b, "\n")
	for i, count := len(b)-1, 0; i >= 0; i-- {
		if b[i] == '\n' {
			if count++; count == n {
				return string(b[i+1:])
			}
		}
	}
	return string(b)
}
