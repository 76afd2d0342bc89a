package worker

import (
	"context"
	"strconv"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// Issue requirement: X2 drifting 0.05 mm/day after 20 flat days (noise
// 0.1 mm, 2 mm tolerance from the shipped TG-142 daily value) is reported at
// Level 1 (a statistical or trend alert) before any Level 2 alert, and the
// Level 2 alert comes when the drift has covered about 2 mm (day ≈ 20 + 40,
// derived: 2 mm / 0.05 mm/day).
func TestDriftRaisesLevel1BeforeLevel2(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", "", nil)
	first1, first2 := -1, -1
	for k := 0; k < 80 && first2 < 0; k++ {
		drift := 0.0
		if k >= 20 {
			drift = 0.05 * float64(k-19)
		}
		f.check(k, 0, drift)
		if _, err := w.Evaluate(f.ctx, false); err != nil {
			t.Fatal(err)
		}
		for _, al := range f.alerts(0) {
			if al.Edge != "X2" {
				continue
			}
			if al.Level == halfmark.LevelInspect && first1 < 0 {
				first1 = k
			}
			if al.Level >= halfmark.LevelScheduled && first2 < 0 {
				first2 = k
			}
		}
	}
	t.Logf("first Level 1 alert on day %d, first Level 2 on day %d", first1, first2)
	if first1 < 0 || first2 < 0 || first1 >= first2 {
		t.Fatalf("first Level 1 alert on day %d, first Level 2 on day %d: want Level 1 first", first1, first2)
	}
	if first2 < 50 || first2 > 70 {
		t.Errorf("Level 2 on day %d; the drift reaches 2 mm about day 60", first2)
	}
	// Every evaluation records the tolerance hash in force.
	if n := f.count(`SELECT count(*) FROM evaluations WHERE tolerance_hash <> $1`, w.Tolerances().Hash()); n != 0 {
		t.Errorf("%d evaluations without the book's hash", n)
	}
}

// A 3 mm step of X1 beyond a 2.5 mm action limit raises a Level 3 alert
// (TG-142 Level 3) and enqueues one notification; a repeat signal updates
// the same alert and enqueues nothing more.
func TestStepRaisesLevel3(t *testing.T) {
	f := newFixture(t)
	var mu sync.Mutex
	var notified []halfmark.Alert
	hook := func(ctx context.Context, tx pgx.Tx, al halfmark.Alert) error {
		mu.Lock()
		defer mu.Unlock()
		notified = append(notified, al)
		return nil
	}
	w := f.worker("w1", customBook, hook)
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	for k := 25; k < 27; k++ {
		f.check(k, 3, 0)
		if _, err := w.Evaluate(f.ctx, false); err != nil {
			t.Fatal(err)
		}
	}
	x1 := f.seriesID("X1")
	var limit []halfmark.Alert
	for _, al := range f.alerts(x1) {
		if al.Family == "limit" {
			limit = append(limit, al)
		}
	}
	if len(limit) != 1 || limit[0].Level != halfmark.LevelImmediate || limit[0].DeviationMM == nil || *limit[0].DeviationMM < 2.5 {
		t.Fatalf("limit alerts %+v, want one Level 3 alert", limit)
	}
	if len(notified) != 1 || notified[0].ID != limit[0].ID {
		t.Errorf("%d notifications, want 1 for alert %d", len(notified), limit[0].ID)
	}
	// Pair attribution: X1 moved, the field grew by about 3 mm (X1 + X2).
	var mover string
	var size float64
	if err := f.db.Pool.QueryRow(f.ctx, `SELECT details->'pair'->>'mover', (details->'pair'->>'field_size_change_mm')::float8
		FROM evaluations WHERE series_id = $1 ORDER BY id DESC LIMIT 1`, x1).Scan(&mover, &size); err != nil {
		t.Fatal(err)
	}
	if mover != "X1" || size < 2.5 || size > 3.5 {
		t.Errorf("pair attribution: mover %q, field size change %.2f mm; want X1 and about 3 mm", mover, size)
	}
	if n := f.count(`SELECT count(*) FROM audit_log WHERE entity = 'alert' AND entity_id = $1 AND action IN ('open','repeat')`, itoa(limit[0].ID)); n != 2 {
		t.Errorf("%d audit rows for the open and the repeat, want 2", n)
	}
}

// Two workers racing on the same slot: one runs it, one evaluation per
// series per slot; two workers evaluating at the same time still leave one
// alert per signal (the partial unique index).
func TestRacingWorkers(t *testing.T) {
	f := newFixture(t)
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	f.check(25, 3, 0)
	w1, w2 := f.worker("w1", customBook, nil), f.worker("w2", customBook, nil)
	slot := f.clock.Now().Truncate(time.Minute)
	var wg sync.WaitGroup
	ran := make([]bool, 2)
	errs := make([]error, 2)
	for i, w := range []*Worker{w1, w2} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ran[i], errs[i] = w.RunSlot(f.ctx, JobIncremental, slot, func(ctx context.Context) (string, error) {
				s, err := w.Evaluate(ctx, false)
				return s.String(), err
			})
		}()
	}
	wg.Wait()
	if errs[0] != nil || errs[1] != nil || ran[0] == ran[1] {
		t.Fatalf("ran %v errors %v: want exactly one worker to run the slot", ran, errs)
	}
	if n := f.count(`SELECT count(*) FROM job_runs WHERE job = $1 AND slot = $2 AND finished_at IS NOT NULL`, JobIncremental, slot); n != 1 {
		t.Errorf("%d job runs for the slot, want 1", n)
	}
	if n := f.count(`SELECT count(*) FROM evaluations`); n != 2 {
		t.Errorf("%d evaluations, want 2 (one per series)", n)
	}
	// Both evaluate at once outside the scheduler: still one alert.
	f.check(26, 3, 0)
	for _, w := range []*Worker{w1, w2} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if _, err := w.Evaluate(f.ctx, true); err != nil {
				t.Error(err)
			}
		}()
	}
	wg.Wait()
	if n := f.count(`SELECT count(*) FROM alerts WHERE family = 'limit'`); n != 1 {
		t.Errorf("%d limit alerts, want 1", n)
	}
	if n := f.count(`SELECT count(*) FROM (SELECT series_id, family FROM alerts GROUP BY 1, 2 HAVING count(*) > 1) d`); n != 0 {
		t.Errorf("%d (series, family) pairs with more than one alert", n)
	}
}

func itoa(v int64) string { return strconv.FormatInt(v, 10) }
