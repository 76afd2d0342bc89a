package dbtest

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"

	"halfmark/db/localpg"
)

// dirPattern names the temporary directories of private clusters; ownerFile
// in each holds the pid of the test process that made it.
const (
	dirPattern = "halfmark-dbtest-"
	ownerFile  = "owner.pid"
)

var shared struct {
	once    sync.Once
	cluster *localpg.Cluster
	dir     string
	err     error
}

func sharedCluster() (*localpg.Cluster, error) {
	shared.once.Do(func() {
		shared.cluster, shared.dir, shared.err = startCluster(os.TempDir())
	})
	return shared.cluster, shared.err
}

// startCluster starts a Throwaway cluster in a new directory under tmp. The
// server is a child of this process and dies with it even if Main never
// gets to stop it.
func startCluster(tmp string) (*localpg.Cluster, string, error) {
	if _, err := localpg.FindBinaries(); err != nil {
		return nil, "", fmt.Errorf("no PostgreSQL server for the tests: set %s (e.g. postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable) or install the server binaries. %w", EnvURL, err)
	}
	removeLeftovers(tmp)
	dir, err := os.MkdirTemp(tmp, dirPattern)
	if err != nil {
		return nil, "", err
	}
	// MkdirTemp makes it 0700; under root the server runs as the postgres
	// OS user, which must be able to enter it.
	if err := os.Chmod(dir, 0o711); err != nil {
		os.RemoveAll(dir)
		return nil, "", err
	}
	if err := os.WriteFile(filepath.Join(dir, ownerFile), []byte(strconv.Itoa(os.Getpid())+"\n"), 0o644); err != nil {
		os.RemoveAll(dir)
		return nil, "", err
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	c, err := localpg.Open(ctx, dir, io.Discard, localpg.Throwaway())
	if err != nil {
		os.RemoveAll(dir)
		return nil, "", err
	}
	return c, dir, nil
}

func stopShared() error {
	if shared.cluster == nil {
		return nil
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	err := shared.cluster.Stop(ctx)
	if rmErr := os.RemoveAll(shared.dir); rmErr != nil {
		err = errors.Join(err, rmErr)
	}
	shared.cluster = nil
	return err
}

// removeLeftovers deletes private-cluster directories of test processes
// that died before Main could clean up (a panic, a timeout, a kill) and
// whose server has exited too.
func removeLeftovers(tmp string) {
	dirs, _ := filepath.Glob(filepath.Join(tmp, dirPattern+"*"))
	for _, dir := range dirs {
		owner := pidIn(filepath.Join(dir, ownerFile))
		if owner == 0 || processAlive(owner) || // 0: being set up, or not ours
			processAlive(pidIn(filepath.Join(dir, "pgdata", "postmaster.pid"))) {
			continue
		}
		os.RemoveAll(dir)
	}
}

// pidIn reads the process id on the first line of path; 0 if none.
func pidIn(path string) int {
	b, err := os.ReadFile(path)
	if err != nil {
		return 0
	}
	first, _, _ := strings.Cut(string(b), "\n")
	pid, _ := strconv.Atoi(strings.TrimSpace(first))
	return pid
}

func processAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}
