package main

import (
	"context"
	"fmt"
	"syscall"
	"testing"
	"time"

	"halfmark"
)

// A worker killed with SIGKILL in the middle of an evaluation run: the next
// worker completes the evaluation, every stepped jaw has one finding, and
// every Level 3 finding sends exactly one e-mail — none lost, none doubled.
func TestWorkerKilledMidEvaluation(t *testing.T) {
	if testing.Short() {
		t.Skip("kill test skipped in -short mode")
	}
	ctx := context.Background()
	url, d := migratedStore(t)
	a := halfmark.CLIActor("kill-test")
	// 12 machines, each with 12 gantry angles × 4 jaws × (position,
	// penumbra) = 96 series of 120 points; jaw X1 of every third machine
	// steps 3.5 mm on its last point at every angle (Level 3 with the
	// shipped book: action limit 3 mm). A run stores one machine per
	// transaction, so it can be caught between machines.
	f := func(v float64) *float64 { return &v }
	start := time.Now().AddDate(0, 0, -200)
	const machines = 12
	stepped := 0
	for mi := 0; mi < machines; mi++ {
		m := halfmark.Machine{Name: fmt.Sprintf("Linac Brume %02d", mi+1), SADcm: 100}
		if err := d.CreateMachine(ctx, a, &m); err != nil {
			t.Fatal(err)
		}
		b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
		if err := d.CreateBeam(ctx, a, &b); err != nil {
			t.Fatal(err)
		}
		step := mi%3 == 0
		if step {
			stepped++
		}
		var cs []halfmark.Check
		for g := 0; g < 12; g++ {
			for i := 0; i < 120; i++ {
				c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: start.Add(time.Duration(i*24+g) * time.Hour),
					Setup: halfmark.Setup{FieldXcm: f(10), FieldYcm: f(10), GantryDeg: f(float64(g * 30))}}
				for j, e := range []string{"X1", "X2", "Y1", "Y2"} {
					pos := 50 + 0.1*float64((i*7+j*3+g)%5-2)
					if e == "X1" && step && i == 119 {
						pos += 3.5
					}
					c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e, PositionMM: pos, PenumbraMM: f(3.2 + 0.02*float64(i%3))})
				}
				cs = append(cs, c)
			}
		}
		if _, err := d.RecordBatch(ctx, a, cs); err != nil {
			t.Fatal(err)
		}
		ss, err := d.MachineSeries(ctx, m.ID)
		if err != nil {
			t.Fatal(err)
		}
		for _, s := range ss {
			if s.Quantity != halfmark.QPosition {
				continue
			}
			v, sd := 50.0, 0.1
			if err := d.SetBaseline(ctx, a, &halfmark.Baseline{SeriesID: s.ID, ValueMM: &v, SigmaMM: &sd, ValidFrom: start.Add(-time.Hour), Reason: "commissioning"}); err != nil {
				t.Fatal(err)
			}
		}
	}
	var total int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM series`).Scan(&total)

	box, port := startMailbox(t)
	env := []string{"HALFMARK_DATABASE_URL=" + url, "HALFMARK_SMTP_HOST=127.0.0.1", "HALFMARK_SMTP_PORT=" + port,
		"HALFMARK_SMTP_TLS=none", "HALFMARK_SMTP_FROM=halfmark@brume.example", "HALFMARK_NOTIFY_LEVEL3=chief@brume.example"}
	bin := buildBinary(t)

	first := startProc(t, bin, env, "worker", "--evaluate-every", "1s", "--deliver-every", "1s")
	killed := false
	for deadline := time.Now().Add(60 * time.Second); time.Now().Before(deadline); time.Sleep(2 * time.Millisecond) {
		var running, evaluated int
		_ = d.Pool.QueryRow(ctx, `SELECT count(*) FILTER (WHERE finished_at IS NULL AND job = 'evaluate-incremental'),
			(SELECT count(DISTINCT s.machine_id) FROM series_state st JOIN series s ON s.id = st.series_id) FROM job_runs`).Scan(&running, &evaluated)
		if running > 0 && evaluated > 0 && evaluated < machines {
			_ = first.Process.Signal(syscall.SIGKILL)
			killed = true
			break
		}
	}
	if !killed {
		t.Fatal("could not catch the worker in the middle of an evaluation")
	}
	_ = first.Wait()
	var before int
	_ = d.Pool.QueryRow(ctx, `SELECT count(DISTINCT series_id) FROM evaluations`).Scan(&before)
	t.Logf("killed after %d of %d series were evaluated", before, total)
	if before >= total {
		t.Fatal("the run had finished when it was killed")
	}

	startProc(t, bin, env, "worker", "--evaluate-every", "1s", "--deliver-every", "1s")
	for deadline := time.Now().Add(90 * time.Second); time.Now().Before(deadline); time.Sleep(200 * time.Millisecond) {
		var done int
		_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM series_state`).Scan(&done)
		if done == total && box.count("Level 3") >= stepped {
			break
		}
	}
	time.Sleep(3 * time.Second) // a few more slots: nothing may be sent twice
	var done int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM series_state`).Scan(&done)
	if done != total {
		t.Fatalf("after restart %d of %d series evaluated", done, total)
	}
	var l3, distinct int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*), count(DISTINCT machine_id) FROM findings WHERE level = 3 AND component = 'X1'`).Scan(&l3, &distinct)
	if l3 != stepped || distinct != stepped {
		t.Fatalf("%d Level 3 findings on %d machines, want one on each of the %d stepped machines", l3, distinct, stepped)
	}
	if n := box.count("Level 3"); n != stepped {
		t.Fatalf("%d Level 3 e-mails for %d findings: notifications lost or doubled", n, stepped)
	}
	var pending int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM outbox WHERE delivered_at IS NULL`).Scan(&pending)
	if pending != 0 {
		t.Fatalf("%d notifications still pending", pending)
	}
}
