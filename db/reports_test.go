package db_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"testing"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func openMigrated(t *testing.T) *db.DB {
	t.Helper()
	url := dbtest.New(t)
	ctx := context.Background()
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	return d
}

// A signed report keeps its exact bytes; its SHA-256 (checked with Go's
// crypto/sha256, FIPS 180-4) is the one stored and the one in the audit
// row; the table refuses UPDATE, DELETE and TRUNCATE.
func TestSignedReports(t *testing.T) {
	d := openMigrated(t)
	ctx := context.Background()
	m := halfmark.Machine{Name: "Heron", Model: "test linac"}
	if err := d.CreateMachine(ctx, halfmark.CLIActor("test"), &m); err != nil {
		t.Fatal(err)
	}
	pdf := []byte("%PDF-1.3 not really a report\x00\xff binary tail")
	phys := halfmark.Actor{Name: "physicist@example.org", Role: halfmark.RolePhysicist}
	ther := halfmark.Actor{Name: "therapist@example.org", Role: halfmark.RoleTherapist}
	draft := halfmark.ReportDraft{MachineID: m.ID, Month: "2026-11", PDF: pdf, Blockers: []string{"6 MV: no monthly check"}}

	if _, err := d.SignedReport(ctx, m.ID, "2026-11"); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Fatalf("unsigned month: %v, want not found", err)
	}
	if _, err := d.SignMonthlyReport(ctx, ther, draft, "ok"); halfmark.ErrorCodeOf(err) != halfmark.EForbidden {
		t.Fatalf("therapist signing: %v, want forbidden", err)
	}
	_, err := d.SignMonthlyReport(ctx, phys, draft, "  ")
	if he, ok := err.(*halfmark.Error); !ok || he.Code != halfmark.EInvalid || len(he.Fields) != 1 || he.Fields[0].Field != "reason" {
		t.Fatalf("blockers without a reason: %v, want invalid naming reason", err)
	}
	if _, err := d.SignMonthlyReport(ctx, phys, halfmark.ReportDraft{MachineID: m.ID, Month: "2026-13", PDF: pdf}, ""); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
		t.Fatalf("month 2026-13: %v, want invalid", err)
	}
	var n int
	if err := d.Pool.QueryRow(ctx, `SELECT count(*) FROM signed_reports`).Scan(&n); err != nil || n != 0 {
		t.Fatalf("refused signatures wrote %d rows (%v)", n, err)
	}

	s, err := d.SignMonthlyReport(ctx, phys, draft, "monthly check of 6 MV moved to December by the chief physicist")
	if err != nil {
		t.Fatal(err)
	}
	want := sha256.Sum256(pdf)
	if s.SHA256 != hex.EncodeToString(want[:]) || s.SignedBy != phys.Name || s.SignedAt.IsZero() {
		t.Fatalf("signature %+v, want sha256 %x by %s", s, want, phys.Name)
	}
	got, err := d.SignedReport(ctx, m.ID, "2026-11")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.PDF, pdf) || got.SHA256 != s.SHA256 || got.Reason == "" || len(got.Blockers) != 1 {
		t.Fatalf("stored report %+v differs from the signed one", got)
	}
	es, err := d.Audit(ctx, "report", halfmark.ReportEntityID(m.ID, "2026-11"), 10)
	if err != nil || len(es) != 1 || es[0].Detail["sha256"] != s.SHA256 || es[0].Actor != phys.Name {
		t.Fatalf("audit %+v (%v): want one sign row with sha256 %s", es, err, s.SHA256)
	}
	if _, err := d.SignMonthlyReport(ctx, phys, halfmark.ReportDraft{MachineID: m.ID, Month: "2026-11", PDF: []byte("%PDF other")}, "again"); halfmark.ErrorCodeOf(err) != halfmark.EConflict {
		t.Fatalf("second signature: %v, want conflict", err)
	}
	for _, q := range []string{`UPDATE signed_reports SET reason = 'x'`, `DELETE FROM signed_reports`, `TRUNCATE signed_reports`,
		`UPDATE signed_reports SET pdf = '\x00'::bytea`} {
		if _, err := d.Pool.Exec(ctx, q); err == nil {
			t.Fatalf("%s was allowed on an append-only table", q)
		}
	}
	got2, _ := d.SignedReport(ctx, m.ID, "2026-11")
	if !bytes.Equal(got2.PDF, pdf) {
		t.Fatal("the signed bytes changed")
	}
}
