package worker

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/db"
)

// Acknowledge and resolve a finding by hand, each with its audit row; the
// states follow open → acknowledged → resolved and refuse other moves, and
// the finding's evidence alerts follow it.
func TestAcknowledgeResolve(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", customBook, nil)
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	f.check(25, 3, 0)
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	open := f.findings("open")
	if len(open) != 1 {
		t.Fatalf("%d open findings after a 3 mm step of one jaw, want 1", len(open))
	}
	id := open[0].ID
	phys := halfmark.Actor{Name: "physicist@clinic", Role: halfmark.RolePhysicist}
	fd, err := f.db.AcknowledgeFinding(f.ctx, phys, id, "seen, jaw service booked")
	if err != nil {
		t.Fatal(err)
	}
	if fd.State != halfmark.FindingAcknowledged || fd.AckBy != phys.Name || fd.AckAt == nil || fd.AckComment != "seen, jaw service booked" {
		t.Errorf("after acknowledge: %+v", fd)
	}
	if n := f.count(`SELECT count(*) FROM alerts WHERE finding_id = $1 AND state <> 'acknowledged'`, id); n != 0 {
		t.Errorf("%d evidence alerts not acknowledged with their finding", n)
	}
	if _, err := f.db.AcknowledgeFinding(f.ctx, phys, id, "again"); halfmark.ErrorCodeOf(err) != halfmark.EConflict {
		t.Errorf("second acknowledge: %v, want a conflict", err)
	}
	if _, err := f.db.ResolveFinding(f.ctx, phys, id, "  "); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
		t.Errorf("resolve without a comment: %v, want invalid", err)
	}
	fd, err = f.db.ResolveFinding(f.ctx, phys, id, "X1 jaw recalibrated")
	if err != nil {
		t.Fatal(err)
	}
	if fd.State != halfmark.FindingResolved || fd.ResolvedBy != phys.Name || fd.ResolvedAt == nil {
		t.Errorf("after resolve: %+v", fd)
	}
	if n := f.count(`SELECT count(*) FROM alerts WHERE finding_id = $1 AND state <> 'resolved'`, id); n != 0 {
		t.Errorf("%d evidence alerts not resolved with their finding", n)
	}
	if _, err := f.db.ResolveFinding(f.ctx, phys, id, "again"); halfmark.ErrorCodeOf(err) != halfmark.EConflict {
		t.Errorf("second resolve: %v, want a conflict", err)
	}
	if _, err := f.db.AcknowledgeFinding(f.ctx, phys, 999999, "x"); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Errorf("acknowledge of a missing finding: %v, want not found", err)
	}
	entries, err := f.db.Audit(f.ctx, "finding", itoa(id), 10)
	if err != nil {
		t.Fatal(err)
	}
	var actions []string
	for _, e := range entries {
		actions = append(actions, e.Actor+":"+e.Action)
	}
	got := strings.Join(actions, ",")
	if !strings.HasPrefix(got, "physicist@clinic:resolve,physicist@clinic:acknowledge,"+db.AutoActor.Name+":open") {
		t.Errorf("audit (newest first) %s", got)
	}
}

// After a 0.6 mm spike (≈ 6σ for σ ≈ 0.1 mm, inside the 5 mm test
// tolerance) the jaw's finding opens, and the first 5 in-control sessions in
// a row resolve it automatically, with an audit row.
func TestAutoResolveAfterMPoints(t *testing.T) {
	f := newFixture(t)
	book := strings.NewReplacer("tolerance_mm = 2.0", "tolerance_mm = 5.0", "action_mm = 2.5", "action_mm = 6.0").Replace(customBook)
	w := f.worker("w1", book, nil)
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	f.check(25, 0.6, 0) // a Shewhart signal on the pooled chart; the CUSUM decays within a few sessions
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	if len(f.findings("active")) == 0 {
		t.Fatal("no finding after the spike")
	}
	for k := 26; k < 45; k++ {
		f.check(k, 0, 0)
		if _, err := w.Evaluate(f.ctx, false); err != nil {
			t.Fatal(err)
		}
		if len(f.findings("active")) == 0 {
			if k-25 < 5 {
				t.Errorf("resolved after %d in-control sessions, want at least 5", k-25)
			}
			if n := f.count(`SELECT count(*) FROM audit_log WHERE entity = 'finding' AND action = 'auto-resolve'`); n != 1 {
				t.Errorf("%d audit rows for the automatic resolution, want 1", n)
			}
			return
		}
	}
	t.Fatal("the finding never resolved itself")
}

// A service event with a new baseline starts a new period for the named
// edge at its time: a 'service' baseline version without value, audited,
// and the evaluation only uses the points after it.
func TestServiceEventStartsNewBaseline(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", "", nil)
	for k := 0; k < 30; k++ {
		f.check(k, 0, 0)
	}
	at := day0.AddDate(0, 0, 29).Add(2 * time.Hour)
	f.clock.Set(at.Add(time.Hour))
	ev := halfmark.ServiceEvent{MachineID: f.machine.ID, At: at, Note: "X2 jaw recalibrated", Edges: []string{"x2"}, NewBaseline: true}
	phys := halfmark.Actor{Name: "physicist@clinic", Role: halfmark.RolePhysicist}
	if err := f.db.CreateServiceEvent(f.ctx, phys, &ev); err != nil {
		t.Fatal(err)
	}
	if bad := (halfmark.ServiceEvent{MachineID: f.machine.ID, At: at}); f.db.CreateServiceEvent(f.ctx, phys, &bad) == nil {
		t.Error("a service event without a note was stored")
	}
	for k := 30; k < 33; k++ {
		f.check(k, 0, 1.5) // the recalibrated jaw sits 1.5 mm further out
	}
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	x2 := f.seriesID("X2")
	bs, err := f.db.Baselines(f.ctx, x2)
	if err != nil {
		t.Fatal(err)
	}
	if len(bs) != 1 || bs[0].Source != halfmark.BaselineService || bs[0].ValueMM != nil || !bs[0].ValidFrom.Equal(at) {
		t.Fatalf("baselines %+v, want one service version from %s", bs, at)
	}
	se, err := f.db.SeriesEvaluation(f.ctx, x2)
	if err != nil {
		t.Fatal(err)
	}
	if n := len(se.Chart.Points); n != 3 || se.Verdict != halfmark.VerdictBaselinePending {
		t.Errorf("X2 evaluated on %d points (verdict %s), want the 3 after the service event, baseline pending", n, se.Verdict)
	}
	if len(f.alerts(x2)) != 0 || len(f.findings("all")) != 0 {
		t.Error("the step at the service event raised an alert or a finding")
	}
	if got := f.count(`SELECT count(*) FROM audit_log WHERE action = 'set-baseline' AND entity_id = $1`, itoa(x2)); got != 1 {
		t.Errorf("%d baseline audit rows, want 1", got)
	}
	evs, err := f.db.ServiceEvents(f.ctx, f.machine.ID)
	if err != nil || len(evs) != 1 || evs[0].Edges[0] != "X2" || evs[0].CreatedBy != phys.Name {
		t.Errorf("service events %+v %v", evs, err)
	}
}

// Status: a machine with a Level 3 series comes before an in-control one
// and one with no checks at all, which is overdue because it is clinical.
func TestStatus(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", customBook, nil)
	idle := halfmark.Machine{Name: "Linac B (no checks)", SADcm: 100, Clinical: true}
	if err := f.db.CreateMachine(f.ctx, halfmark.CLIActor("test"), &idle); err != nil {
		t.Fatal(err)
	}
	if err := f.db.CreateBeam(f.ctx, halfmark.CLIActor("test"), &halfmark.Beam{MachineID: idle.ID, EnergyMV: 6}); err != nil {
		t.Fatal(err)
	}
	spare := halfmark.Machine{Name: "Linac C (not clinical)", SADcm: 100}
	if err := f.db.CreateMachine(f.ctx, halfmark.CLIActor("test"), &spare); err != nil {
		t.Fatal(err)
	}
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	f.check(25, 3, 0)
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	st, err := f.db.StatusWith(f.ctx, f.clock.Now(), db.DefaultStatusOptions)
	if err != nil {
		t.Fatal(err)
	}
	if len(st) != 3 || st[0].Name != "Linac A" || st[1].Name != idle.Name || st[2].Name != spare.Name {
		t.Fatalf("order %+v", st)
	}
	if st[0].Level != halfmark.LevelImmediate || st[0].Worst == nil || st[0].Worst.Edge != "X1" || st[0].OpenAlerts == 0 || st[0].LastCheckAt == nil {
		t.Errorf("Linac A: %+v worst %+v", st[0], st[0].Worst)
	}
	if !st[1].Overdue || st[2].Overdue {
		t.Errorf("overdue: clinical without checks %v, not clinical %v; want true, false", st[1].Overdue, st[2].Overdue)
	}
}

// With weekends off, a Friday 07:30 check covers Saturday and Sunday:
// Monday 08:00 is 72.5 h later, 48 h of them weekend, so 24.5 h count
// (< 30 h: not overdue); Monday 14:00 counts 30.5 h (overdue). Derived
// arithmetic.
func TestOverdueWeekends(t *testing.T) {
	fri := time.Date(2026, 3, 6, 7, 30, 0, 0, time.UTC)
	limit := 30 * time.Hour
	if db.Overdue(&fri, time.Date(2026, 3, 9, 8, 0, 0, 0, time.UTC), limit, true, time.UTC, true) {
		t.Error("Monday 08:00 is overdue with weekends off")
	}
	if !db.Overdue(&fri, time.Date(2026, 3, 9, 14, 0, 0, 0, time.UTC), limit, true, time.UTC, true) {
		t.Error("Monday 14:00 is not overdue")
	}
	if !db.Overdue(&fri, time.Date(2026, 3, 9, 8, 0, 0, 0, time.UTC), limit, false, time.UTC, true) {
		t.Error("Monday 08:00 is not overdue with weekends counted")
	}
	if db.Overdue(nil, fri, limit, true, time.UTC, false) || !db.Overdue(nil, fri, limit, true, time.UTC, true) {
		t.Error("a never-done check is overdue only on a clinical machine")
	}
}

// Reload (SIGHUP) refuses a bad file, naming its line, and keeps the old
// book; a good file replaces it and its hash goes into later evaluations.
func TestReloadTolerances(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", customBook, nil)
	old := w.Tolerances().Hash()
	p := w.cfg.TolerancesPath
	if err := os.WriteFile(p, []byte(customBook+"\n[[limit]]\nquantity = 1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	err := w.Reload()
	if err == nil || !strings.Contains(err.Error(), "line") || w.Tolerances().Hash() != old {
		t.Fatalf("bad file: %v; hash %s (old %s)", err, w.Tolerances().Hash(), old)
	}
	if err := os.WriteFile(p, []byte(strings.Replace(customBook, "2.5", "2.8", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := w.Reload(); err != nil || w.Tolerances().Hash() == old {
		t.Fatalf("good file: %v", err)
	}
	_ = filepath.Base(p)
}

// Acknowledging a CUSUM alert restarts the series' CUSUM after the newest
// evaluated point (spc.md: Halfmark resets after an acknowledged signal):
// one more point 0.3 mm high then gives C+ = 0.3 − k·σ ≈ 0.25 mm, below
// H = 5σ ≈ 0.5 mm (derived for σ ≈ 0.1 mm), so no CUSUM signal.
func TestAcknowledgedCUSUMRestarts(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", "", nil)
	for k := 0; k < 25; k++ {
		f.check(k, 0, 0)
	}
	for k := 25; k < 33; k++ {
		f.check(k, 0.3, 0)
	}
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	x1 := f.seriesID("X1")
	var cusum *halfmark.Alert
	for _, al := range f.alerts(x1) {
		if al.Family == "cusum" {
			cusum = &al
		}
	}
	if cusum == nil {
		t.Fatal("no CUSUM alert after eight points 3σ high")
	}
	if _, err := f.db.Acknowledge(f.ctx, halfmark.Actor{Name: "physicist@clinic", Role: halfmark.RolePhysicist}, cusum.ID, "known: jaw drift under investigation"); err != nil {
		t.Fatal(err)
	}
	var restart, last time.Time
	if err := f.db.Pool.QueryRow(f.ctx, `SELECT cusum_restart_at, last_measured_at FROM series_state WHERE series_id = $1`, x1).Scan(&restart, &last); err != nil {
		t.Fatal(err)
	}
	if !restart.Equal(last) || !last.Equal(day0.AddDate(0, 0, 32)) {
		t.Errorf("CUSUM restart at %s, newest point %s; want both at day 32", restart, last)
	}
	f.check(33, 0.3, 0)
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	var fired bool
	if err := f.db.Pool.QueryRow(f.ctx, `SELECT coalesce(details->'verdict'->'signals' @> '[{"family":"cusum"}]', false)
		FROM evaluations WHERE series_id = $1 ORDER BY id DESC LIMIT 1`, x1).Scan(&fired); err != nil {
		t.Fatal(err)
	}
	if fired {
		t.Error("the CUSUM signalled again right after the acknowledged restart")
	}
}

// A clinical beam whose morning check is 40 h old on a Thursday (limit
// 24 h + 6 h grace, no weekend in between) gets one overdue alert, audited;
// once a morning and a monthly check are done the alert resolves itself.
func TestOverdueAlerts(t *testing.T) {
	f := newFixture(t)
	w := f.worker("w1", "", nil)
	for k := 0; k < 3; k++ {
		f.check(k, 0, 0)
	}
	f.clock.Set(day0.AddDate(0, 0, 2).Add(40 * time.Hour)) // Thursday 23:30
	for range 2 {
		if _, err := w.Evaluate(f.ctx, false); err != nil {
			t.Fatal(err)
		}
	}
	al, err := f.db.Alerts(f.ctx, halfmark.AlertFilter{MachineID: f.machine.ID})
	if err != nil {
		t.Fatal(err)
	}
	var overdue []halfmark.Alert
	for _, a := range al {
		if a.Family == "overdue" {
			overdue = append(overdue, a)
		}
	}
	if len(overdue) != 1 || overdue[0].SeriesID != nil || !strings.Contains(overdue[0].Rule, "morning check overdue") {
		t.Fatalf("overdue alerts %+v", overdue)
	}
	f.check(4, 0, 0) // Friday morning
	monthly := halfmark.Check{MachineID: f.machine.ID, BeamID: f.beam.ID, Kind: halfmark.KindMonthly, MeasuredAt: day0.AddDate(0, 0, 4).Add(time.Hour),
		Setup: halfmark.Setup{FieldXcm: fptr(10), FieldYcm: fptr(10)}, Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50}}}
	f.clock.Set(monthly.MeasuredAt.Add(time.Minute))
	if _, _, err := f.db.RecordCheck(f.ctx, halfmark.CLIActor("test"), &monthly); err != nil {
		t.Fatal(err)
	}
	if _, err := w.Evaluate(f.ctx, false); err != nil {
		t.Fatal(err)
	}
	a, err := f.db.Alert(f.ctx, overdue[0].ID)
	if err != nil || a.State != halfmark.AlertResolved {
		t.Errorf("overdue alert after the checks: %+v %v", a, err)
	}
	if n := f.count(`SELECT count(*) FROM audit_log WHERE entity = 'alert' AND entity_id = $1`, itoa(a.ID)); n != 2 {
		t.Errorf("%d audit rows for the overdue alert, want 2 (open, auto-resolve)", n)
	}
}
