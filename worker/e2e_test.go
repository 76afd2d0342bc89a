package worker

import (
	"context"
	"strconv"
	"sync"
	"testing"
	"time"

	"halfmark"
)

// recorder is a FindingNotifier that records what it was asked to compose.
type recorder struct {
	mu sync.Mutex
	fs []halfmark.Finding
}

func (r *recorder) FindingNotifications(f halfmark.Finding) []halfmark.Notification {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.fs = append(r.fs, f)
	return nil
}

// findings returns the machine's findings in the given state filter.
func (f *fixture) findings(state string) []halfmark.Finding {
	f.t.Helper()
	fs, err := f.db.Findings(f.ctx, halfmark.FindingFilter{MachineID: f.machine.ID, State: state})
	if err != nil {
		f.t.Fatal(err)
	}
	return fs
}

// X2 drifting 0.05 mm/day after 20 flat days (noise 0.1 mm, 2 mm tolerance
// from the shipped TG-142 daily value) is one finding on jaw X2: Level 1 (a
// statistical or trend signal) before Level 2, and Level 2 when the drift
// has covered about 2 mm (day ≈ 20 + 40; analytic: 2 mm / 0.05 mm/day).
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
		for _, fd := range f.findings("active") {
			if fd.Kind != halfmark.ComponentJaw || fd.Name != "X2" {
				t.Fatalf("day %d: finding on %s; only jaw X2 moves", k, fd.Component)
			}
			if fd.Level == halfmark.LevelInspect && first1 < 0 {
				first1 = k
			}
			if fd.Level >= halfmark.LevelScheduled && first2 < 0 {
				first2 = k
			}
		}
	}
	t.Logf("first Level 1 finding on day %d, first Level 2 on day %d", first1, first2)
	if first1 < 0 || first2 < 0 || first1 >= first2 {
		t.Fatalf("first Level 1 finding on day %d, first Level 2 on day %d: want Level 1 first", first1, first2)
	}
	if first2 < 50 || first2 > 70 {
		t.Errorf("Level 2 on day %d; the drift reaches 2 mm about day 60", first2)
	}
	if n := len(f.findings("all")); n != 1 {
		t.Errorf("%d findings for one drifting jaw, want 1", n)
	}
	// Every evaluation records the tolerance hash in force.
	if n := f.count(`SELECT count(*) FROM evaluations WHERE tolerance_hash <> $1`, w.Tolerances().Hash()); n != 0 {
		t.Errorf("%d evaluations without the book's hash", n)
	}
}

// A 3 mm step of X1 beyond a 2.5 mm action limit is one Level 3 finding on
// jaw X1 (TG-142 Level 3) and one notification; a repeat updates the same
// finding and notifies nothing more.
func TestStepRaisesLevel3(t *testing.T) {
	f := newFixture(t)
	rec := &recorder{}
	w := f.worker("w1", customBook, rec)
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
	fs := f.findings("active")
	if len(fs) != 1 || fs[0].Level != halfmark.LevelImmediate || fs[0].Name != "X1" || fs[0].Kind != halfmark.ComponentJaw ||
		fs[0].MagnitudeMM < 2.5 || fs[0].Direction != 1 {
		t.Fatalf("findings %+v, want one Level 3 outward finding on jaw X1", fs)
	}
	if fs[0].Crossing.Status != halfmark.CrossingAlreadyBeyond || fs[0].Crossing.ToleranceDate != nil {
		t.Errorf("crossing %+v: a jaw beyond its limits shows no projected date", fs[0].Crossing)
	}
	if len(rec.fs) != 1 || rec.fs[0].ID != fs[0].ID {
		t.Errorf("%d notifications, want 1 for finding %d", len(rec.fs), fs[0].ID)
	}
	x1 := f.seriesID("X1")
	if len(fs[0].Evidence) == 0 || fs[0].Evidence[0].SeriesID != x1 {
		t.Errorf("evidence %+v, want series %d", fs[0].Evidence, x1)
	}
	if n := f.count(`SELECT count(*) FROM audit_log WHERE entity = 'finding' AND entity_id = $1 AND action = 'open'`, itoa(fs[0].ID)); n != 1 {
		t.Errorf("%d audit rows for the opening, want 1", n)
	}
	// The series' evidence alert is tied to the finding and was not notified on its own.
	if n := f.count(`SELECT count(*) FROM alerts WHERE series_id = $1 AND family = 'limit' AND finding_id = $2`, x1, fs[0].ID); n != 1 {
		t.Errorf("%d limit alerts of X1 tied to the finding, want 1", n)
	}
}

// Two workers racing on the same slot: one runs it, one evaluation per
// series per slot; two workers evaluating at the same time still leave one
// finding per component and one alert per signal.
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
	// Both evaluate at once outside the scheduler: still one finding, one alert.
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
	if n := f.count(`SELECT count(*) FROM findings`); n != 1 {
		t.Errorf("%d findings, want 1", n)
	}
	if n := f.count(`SELECT count(*) FROM alerts WHERE family = 'limit'`); n != 1 {
		t.Errorf("%d limit alerts, want 1", n)
	}
	if n := f.count(`SELECT count(*) FROM (SELECT series_id, family FROM alerts GROUP BY 1, 2 HAVING count(*) > 1) d`); n != 0 {
		t.Errorf("%d (series, family) pairs with more than one alert", n)
	}
}

func itoa(v int64) string { return strconv.FormatInt(v, 10) }
