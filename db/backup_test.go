package db_test

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
	"halfmark/db/localpg"
)

// tableDigests returns, for every table of the public schema, the row count
// and an MD5 of all its rows in primary-key order: two databases with equal
// digests hold the same data.
func tableDigests(t *testing.T, url string) map[string]string {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	rows, err := conn.Query(ctx, `SELECT tablename FROM pg_tables WHERE schemaname = 'public' ORDER BY 1`)
	if err != nil {
		t.Fatal(err)
	}
	tables, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]string{}
	for _, tb := range tables {
		var n int
		var sum *string
		q := fmt.Sprintf(`SELECT count(*), md5(string_agg(t::text, E'\n' ORDER BY t::text)) FROM %s t`, pgx.Identifier{tb}.Sanitize())
		if err := conn.QueryRow(ctx, q).Scan(&n, &sum); err != nil {
			t.Fatal(err)
		}
		s := "-"
		if sum != nil {
			s = *sum
		}
		out[tb] = fmt.Sprintf("%d rows %s", n, s)
	}
	return out
}

// pgTool finds pg_dump or pg_restore: beside the server binaries, else PATH.
func pgTool(t *testing.T, name string) string {
	if dir, err := localpg.FindBinaries(); err == nil {
		if p := filepath.Join(dir, name); fileExists(p) {
			return p
		}
	}
	p, err := exec.LookPath(name)
	if err != nil {
		t.Fatalf("%s not found: install the PostgreSQL client (apt-get install postgresql-client)", name)
	}
	return p
}

func fileExists(p string) bool { _, err := os.Stat(p); return err == nil }

// The backup procedure of the README (pg_dump --format=custom, pg_restore
// into a new database) brings back every row of every table unchanged.
func TestBackupAndRestoreKeepEveryRecord(t *testing.T) {
	ctx := context.Background()
	src := dbtest.New(t)
	if err := db.Migrate(ctx, src, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, src)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	a := halfmark.CLIActor("backup-test")
	m := halfmark.Machine{Name: "Linac Aster", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6, FFF: true}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	pen := 3.1
	var first string
	for i := 0; i < 40; i++ {
		c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMorning, MeasuredAt: time.Date(2026, 1, 1, 7, 0, 0, 0, time.UTC).AddDate(0, 0, i),
			Operator: "R. Quill", Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50 + float64(i)*0.01, PenumbraMM: &pen}, {Edge: "Y2", PositionMM: 50}}}
		sc, _, err := d.RecordCheck(ctx, a, &c)
		if err != nil {
			t.Fatal(err)
		}
		if i == 0 {
			first = sc.ID
		}
	}
	corr := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMorning, MeasuredAt: time.Date(2026, 1, 1, 7, 0, 0, 0, time.UTC),
		Supersedes: first, Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 49.9}}}
	if _, _, err := d.RecordCheck(ctx, a, &corr); err != nil {
		t.Fatal(err)
	}
	ss, err := d.MachineSeries(ctx, m.ID)
	if err != nil || len(ss) == 0 {
		t.Fatal(err)
	}
	pos := ss[0]
	for _, s := range ss {
		if s.Quantity == halfmark.QPosition {
			pos = s
			break
		}
	}
	v := 50.0
	if err := d.SetBaseline(ctx, a, &halfmark.Baseline{SeriesID: pos.ID, ValueMM: &v, ValidFrom: time.Date(2025, 12, 1, 0, 0, 0, 0, time.UTC), Reason: "commissioning"}); err != nil {
		t.Fatal(err)
	}
	if _, _, err := d.CreateToken(ctx, a, "console", halfmark.RoleTherapist); err != nil {
		t.Fatal(err)
	}
	before := tableDigests(t, src)

	dump := filepath.Join(t.TempDir(), "halfmark.dump")
	if out, err := exec.Command(pgTool(t, "pg_dump"), "--format=custom", "--file="+dump, src).CombinedOutput(); err != nil {
		t.Fatalf("pg_dump: %v\n%s", err, out)
	}
	dst := dbtest.New(t)
	if out, err := exec.Command(pgTool(t, "pg_restore"), "--no-owner", "--single-transaction", "--exit-on-error", "--dbname="+dst, dump).CombinedOutput(); err != nil {
		t.Fatalf("pg_restore: %v\n%s", err, out)
	}
	after := tableDigests(t, dst)
	for tb, want := range before {
		if after[tb] != want {
			t.Errorf("table %s: before %s, after restore %s", tb, want, after[tb])
		}
	}
	for _, tb := range []string{"checks", "baselines", "audit_log", "machines"} {
		if strings.HasPrefix(before[tb], "0 rows") {
			t.Errorf("table %s was empty: the test proves nothing for it", tb)
		}
	}
	// The restored database is a working store: migrations find nothing to do
	// and the append-only rule still holds.
	if err := db.Migrate(ctx, dst, nil); err != nil {
		t.Fatal(err)
	}
	r, err := db.Open(ctx, dst)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.Pool.Exec(ctx, `DELETE FROM checks`); err == nil {
		t.Fatal("the restored database allows DELETE on checks")
	}
}
