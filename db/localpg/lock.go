package localpg

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"syscall"
	"time"
)

const lockFileName = "halfmark.lock"

// dirLock is an exclusive flock(2) on dataDir/halfmark.lock. flock locks
// belong to the open file, so two Opens in one process exclude each other as
// well as two processes do; the kernel drops the lock if the holder dies.
type dirLock struct{ f *os.File }

func lockDir(ctx context.Context, dataDir string, logw io.Writer) (*dirLock, error) {
	path := filepath.Join(dataDir, lockFileName)
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if errors.Is(err, os.ErrPermission) {
		f, err = os.Open(path) // flock works on a read-only descriptor too
	}
	if err != nil {
		return nil, fmt.Errorf("open lock file: %w", err)
	}
	told := false
	for {
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
		if err == nil {
			return &dirLock{f}, nil
		}
		if !errors.Is(err, syscall.EWOULDBLOCK) && !errors.Is(err, syscall.EINTR) {
			f.Close()
			return nil, fmt.Errorf("lock %s: %w", path, err)
		}
		if !told {
			fmt.Fprintf(logw, "localpg: waiting for another process that is starting the cluster in %s\n", dataDir)
			told = true
		}
		select {
		case <-ctx.Done():
			f.Close()
			return nil, fmt.Errorf("waiting for %s: %w", path, ctx.Err())
		case <-time.After(20 * time.Millisecond):
		}
	}
}

func (l *dirLock) release() {
	syscall.Flock(int(l.f.Fd()), syscall.LOCK_UN)
	l.f.Close()
}
