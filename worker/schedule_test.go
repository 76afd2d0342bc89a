package worker

import (
	"context"
	"os"
	"strings"
	"syscall"
	"testing"
	"time"
)

// The schedule runs the incremental evaluation through job_runs (one row
// per minute slot however often cron fires), and SIGHUP reloads the
// tolerance book.
func TestScheduleAndSIGHUP(t *testing.T) {
	f := newFixture(t)
	for k := 0; k < 3; k++ {
		f.check(k, 0, 0)
	}
	f.clock.Set(time.Date(2026, 3, 5, 9, 0, 10, 0, time.UTC)) // fixed: every tick falls in one minute slot
	w := f.worker("w1", customBook, nil)
	w.cfg.IncrementalSpec = "@every 1s"
	old := w.Tolerances().Hash()
	ctx, cancel := context.WithCancel(f.ctx)
	done := make(chan error, 1)
	go func() { done <- w.Start(ctx) }()
	deadline := time.Now().Add(10 * time.Second)
	for f.count(`SELECT count(*) FROM job_runs WHERE job = $1 AND finished_at IS NOT NULL`, JobIncremental) == 0 {
		if time.Now().After(deadline) {
			t.Fatal("the incremental job never ran")
		}
		time.Sleep(100 * time.Millisecond)
	}
	if err := os.WriteFile(w.cfg.TolerancesPath, []byte(strings.Replace(customBook, "2.5", "2.7", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Kill(os.Getpid(), syscall.SIGHUP); err != nil {
		t.Fatal(err)
	}
	for w.Tolerances().Hash() == old {
		if time.Now().After(deadline) {
			t.Fatal("SIGHUP did not reload the tolerances")
		}
		time.Sleep(50 * time.Millisecond)
	}
	time.Sleep(1500 * time.Millisecond) // more ticks in the same slot
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if n := f.count(`SELECT count(*) FROM job_runs WHERE job = $1`, JobIncremental); n != 1 {
		t.Errorf("%d incremental runs in one minute slot, want 1", n)
	}
	if n := f.count(`SELECT count(*) FROM evaluations`); n != 2 {
		t.Errorf("%d evaluations, want 2 (X1 and X2 once)", n)
	}
}
