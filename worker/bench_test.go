package worker

import (
	"context"
	"halfmark"
	"io"
	"log/slog"
	"testing"
	"time"

	"halfmark/db"
	"halfmark/db/dbtest"
)

// seedBench stores 2,000 position series of 500 daily points each: 10
// machines × 50 field geometries × 4 jaw edges, one check a day per
// geometry (250,000 checks), values 50 mm plus uniform noise of ±0.17 mm.
func seedBench(b *testing.B) (*db.DB, time.Time) {
	b.Helper()
	ctx := context.Background()
	url := dbtest.New(b)
	if err := db.Migrate(ctx, url, nil); err != nil {
		b.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(d.Close)
	t0 := time.Date(2025, 1, 1, 7, 30, 0, 0, time.UTC)
	for _, q := range []string{
		`INSERT INTO machines (name, sad_cm, created_by) SELECT 'Linac ' || m, 100, 'bench' FROM generate_series(1, 10) m`,
		`INSERT INTO beams (machine_id, energy_mv, created_by) SELECT id, 6, 'bench' FROM machines`,
		`INSERT INTO checks (id, machine_id, beam_id, kind, measured_at, field_x_cm, field_y_cm, geometry, edges, body_hash, created_by, created_at)
		 SELECT gen_random_uuid(), b.machine_id, b.id, 'morning', $1::timestamptz + d * interval '1 day', g, 10, g || '×10 cm, iso',
		        jsonb_build_array(
		          jsonb_build_object('edge', 'X1', 'position_mm', 50, 'iso_position_mm', g * 5 + (random() - 0.5) * 0.35),
		          jsonb_build_object('edge', 'X2', 'position_mm', 50, 'iso_position_mm', g * 5 + (random() - 0.5) * 0.35),
		          jsonb_build_object('edge', 'Y1', 'position_mm', 50, 'iso_position_mm', 50 + (random() - 0.5) * 0.35),
		          jsonb_build_object('edge', 'Y2', 'position_mm', 50, 'iso_position_mm', 50 + (random() - 0.5) * 0.35)),
		        md5(random()::text), 'bench', $1::timestamptz + d * interval '1 day'
		 FROM beams b, generate_series(1, 50) g, generate_series(0, 499) d`,
		`INSERT INTO series (machine_id, beam_id, geometry, edge, quantity)
		 SELECT DISTINCT c.machine_id, c.beam_id, c.geometry, e, 'position' FROM checks c, unnest(ARRAY['X1','X2','Y1','Y2']) e`,
		`ANALYZE`,
	} {
		var args []any
		if len(q) > 20 && q[:20] == "INSERT INTO checks (" {
			args = []any{t0}
		}
		if _, err := d.Pool.Exec(ctx, q, args...); err != nil {
			b.Fatalf("seed: %v", err)
		}
	}
	return d, t0.AddDate(0, 0, 500)
}

// BenchmarkEvaluation compares evaluation with reading the same points
// from PostgreSQL, in the same run: "read" loads every machine's series with
// their points (db.LoadMachineSeries); "evaluate" runs the drift engine on
// what was read (EvaluateMachine: pure, no I/O); the ratio evaluate/read is
// reported as eval/read beside both times. "full-job" is the whole nightly
// job (read, evaluate, store); "incremental" stores one new check on 5
// geometries of every machine and runs the incremental job, which evaluates
// each touched machine whole (its components pool every series).
func BenchmarkEvaluation(b *testing.B) {
	d, now := seedBench(b)
	ctx := context.Background()
	w, err := New(d, Config{Now: func() time.Time { return now }, Location: time.UTC, WorkerID: "bench"}, slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		b.Fatal(err)
	}
	ids, err := d.MachinesToEvaluate(ctx, false)
	if err != nil || len(ids) != 10 {
		b.Fatalf("%d machines, %v", len(ids), err)
	}
	read := func() [][]halfmark.SeriesData {
		var all [][]halfmark.SeriesData
		for _, id := range ids {
			ss, err := d.LoadMachineSeries(ctx, id, now)
			if err != nil {
				b.Fatal(err)
			}
			all = append(all, ss)
		}
		return all
	}
	var readTime, evalTime time.Duration
	var rounds int
	b.Run("read+evaluate-2000x500", func(b *testing.B) {
		for b.Loop() {
			t := time.Now()
			all := read()
			readTime += time.Since(t)
			t = time.Now()
			for i, ss := range all {
				ev, err := EvaluateMachine(ids[i], ss, w.Tolerances(), w.Detection(), now)
				if err != nil || len(ev.Series) != len(ss) {
					b.Fatalf("%d evaluations of %d series: %v", len(ev.Series), len(ss), err)
				}
			}
			evalTime += time.Since(t)
			rounds++
		}
		b.ReportMetric(float64(readTime.Milliseconds())/float64(rounds), "read-ms")
		b.ReportMetric(float64(evalTime.Milliseconds())/float64(rounds), "evaluate-ms")
		b.ReportMetric(float64(evalTime)/float64(readTime), "eval/read")
	})
	b.Run("full-job-2000x500", func(b *testing.B) {
		for b.Loop() {
			if _, err := w.Evaluate(ctx, true); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("incremental-10-machines", func(b *testing.B) {
		if _, err := w.Evaluate(ctx, true); err != nil { // every series evaluated once: only new points remain
			b.Fatal(err)
		}
		day := 0
		for b.Loop() {
			b.StopTimer()
			day++
			if _, err := d.Pool.Exec(ctx, `INSERT INTO checks (id, machine_id, beam_id, kind, measured_at, field_x_cm, field_y_cm, geometry, edges, body_hash, created_by)
				SELECT gen_random_uuid(), b.machine_id, b.id, 'morning', $1::timestamptz, g, 10, g || '×10 cm, iso',
				       jsonb_build_array(jsonb_build_object('edge', 'X1', 'position_mm', 50, 'iso_position_mm', g * 5),
				                         jsonb_build_object('edge', 'X2', 'position_mm', 50, 'iso_position_mm', g * 5),
				                         jsonb_build_object('edge', 'Y1', 'position_mm', 50, 'iso_position_mm', 50),
				                         jsonb_build_object('edge', 'Y2', 'position_mm', 50, 'iso_position_mm', 50)),
				       md5(random()::text), 'bench'
				FROM beams b, generate_series(1, 5) g`, now.AddDate(0, 0, day)); err != nil {
				b.Fatal(err)
			}
			b.StartTimer()
			s, err := w.Evaluate(ctx, false)
			if err != nil {
				b.Fatal(err)
			}
			if s.Machines != 10 {
				b.Fatalf("incremental run evaluated %d machines, want 10", s.Machines)
			}
		}
	})
}
