package localpg

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
)

// pidFile is what the postmaster writes in the data directory while it runs.
// Lines (PostgreSQL 10 and later, src/include/utils/pidfile.h): 1 PID,
// 2 data directory, 3 start time, 4 port, 5 first socket directory,
// 6 first listen address, 7 shared memory key, 8 status.
type pidFile struct {
	pid    int    // negative for a single-user backend
	port   int    // 0 when not written yet
	status string // "starting", "stopping", "ready", "standby" or "" (not written yet)
}

const pidFileName = "postmaster.pid"

// readPIDFile parses pgdata/postmaster.pid; fs.ErrNotExist when no server
// has the directory.
func readPIDFile(pgdata string) (pidFile, error) {
	b, err := os.ReadFile(filepath.Join(pgdata, pidFileName))
	if err != nil {
		return pidFile{}, err
	}
	lines := strings.Split(string(b), "\n")
	var pf pidFile
	if pf.pid, err = strconv.Atoi(strings.TrimSpace(lines[0])); err != nil || pf.pid == 0 {
		return pidFile{}, fmt.Errorf("%s: first line %q is not a process id", filepath.Join(pgdata, pidFileName), lines[0])
	}
	if len(lines) > 3 {
		pf.port, _ = strconv.Atoi(strings.TrimSpace(lines[3]))
	}
	if len(lines) > 7 {
		pf.status = strings.TrimSpace(lines[7])
	}
	return pf, nil
}

// isPostmasterOf reports whether process pid is alive and runs in pgdata. A
// postmaster makes its data directory its working directory, so
// /proc/<pid>/cwd tells a live server from a process that merely reuses the
// number of a dead one. When /proc cannot say (another user's process seen by
// a normal user, or no /proc), a live process counts as the server.
func isPostmasterOf(pid int, pgdata string) bool {
	if pid <= 0 {
		return false
	}
	if err := syscall.Kill(pid, 0); errors.Is(err, syscall.ESRCH) {
		return false
	}
	cwd, err := os.Stat(fmt.Sprintf("/proc/%d/cwd", pid))
	switch {
	case errors.Is(err, fs.ErrNotExist):
		// Gone, or a zombie whose cwd is no longer visible.
		return false
	case err != nil:
		return true
	}
	dir, err := os.Stat(pgdata)
	if err != nil {
		return true
	}
	return os.SameFile(cwd, dir)
}

// removeStaleLocks deletes the postmaster.pid of a dead server and the
// socket lock files it left, so the next start does not trip over a process
// number that now belongs to someone else.
func removeStaleLocks(pgdata, socketDir string) error {
	if err := os.Remove(filepath.Join(pgdata, pidFileName)); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	if socketDir == "" {
		return nil
	}
	matches, _ := filepath.Glob(filepath.Join(socketDir, ".s.PGSQL.*"))
	for _, m := range matches {
		if err := os.Remove(m); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return err
		}
	}
	return nil
}
