package db_test

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"net/url"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

// runtimeRole migrates a fresh database as its owner with a runtime role of
// its own (roles are cluster-wide, so each test names one) and returns the
// owner's URL and the runtime role's URL.
func runtimeRole(t *testing.T) (ownerURL, appURL, role string) {
	t.Helper()
	ownerURL = dbtest.New(t)
	b := make([]byte, 6)
	rand.Read(b)
	role = "halfmark_app_t" + hex.EncodeToString(b)
	pw := hex.EncodeToString(b) + "pw"
	if err := db.MigrateWith(context.Background(), ownerURL, db.MigrateOptions{AppRole: role, AppPassword: pw}, nil); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		// The database (with the grants) is dropped after this cleanup runs;
		// the role outlives it only when the drop fails.
		go dropRoleLater(ownerURL, role)
	})
	u, err := url.Parse(ownerURL)
	if err != nil {
		t.Fatal(err)
	}
	u.User = url.UserPassword(role, pw)
	return ownerURL, u.String(), role
}

func dropRoleLater(ownerURL, role string) {
	time.Sleep(2 * time.Second)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	u, err := url.Parse(ownerURL)
	if err != nil {
		return
	}
	u.Path = "/postgres"
	conn, err := pgx.Connect(ctx, u.String())
	if err != nil {
		return
	}
	defer conn.Close(ctx)
	_, _ = conn.Exec(ctx, "DROP ROLE IF EXISTS "+pgx.Identifier{role}.Sanitize())
}

// The runtime role cannot break the append-only promise: each of the six
// ways a table owner or superuser could (UPDATE, DELETE and TRUNCATE on a
// record table, DISABLE TRIGGER, DROP TRIGGER, session_replication_role =
// replica, which skips ordinary triggers) is refused, and every record is
// still there afterwards. PostgreSQL documentation, ALTER TABLE ("you must
// own the table"), DROP TRIGGER ("the user must be the owner of the table"),
// and session_replication_role (settable by superusers only).
func TestRuntimeRoleCannotTamper(t *testing.T) {
	ctx := context.Background()
	ownerURL, appURL, role := runtimeRole(t)

	owner, err := db.Open(ctx, ownerURL)
	if err != nil {
		t.Fatal(err)
	}
	defer owner.Close()
	if w := mustRole(t, owner).Warning(); !strings.Contains(w, "append-only not enforced") {
		t.Errorf("owner connection: warning %q, want the append-only warning", w)
	}

	app, err := db.Open(ctx, appURL)
	if err != nil {
		t.Fatal(err)
	}
	defer app.Close()
	info := mustRole(t, app)
	if info.Name != role || info.Superuser || info.Owner || info.Warning() != "" {
		t.Fatalf("runtime role %+v, warning %q", info, info.Warning())
	}

	// The service's own work succeeds as the runtime role.
	a := halfmark.CLIActor("roles-test")
	m := halfmark.Machine{Name: "Tern", SADcm: 100}
	if err := app.CreateMachine(ctx, a, &m); err != nil {
		t.Fatalf("create machine as runtime role: %v", err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := app.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	x := 50.0
	c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMorning, MeasuredAt: time.Now().Add(-time.Hour),
		Setup: halfmark.Setup{FieldXcm: ptr(10.0), FieldYcm: ptr(10.0)},
		Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: x, PenumbraMM: ptr(3.0)}}}
	if _, _, err := app.RecordCheck(ctx, a, &c); err != nil {
		t.Fatalf("record check as runtime role: %v", err)
	}

	tamper := []string{
		`UPDATE checks SET note = 'changed'`,
		`DELETE FROM audit_log`,
		`TRUNCATE baselines`,
		`ALTER TABLE checks DISABLE TRIGGER checks_append_only`,
		`DROP TRIGGER checks_append_only ON checks`,
		`SET session_replication_role = replica`,
	}
	succeeded := 0
	for _, stmt := range tamper {
		_, err := app.Pool.Exec(ctx, stmt)
		var pe *pgconn.PgError
		if err == nil {
			succeeded++
			t.Errorf("%s: succeeded as the runtime role", stmt)
			continue
		}
		if !pgErrorAs(err, &pe) || pe.Code != "42501" {
			t.Errorf("%s: %v, want insufficient_privilege (42501)", stmt, err)
		}
	}
	t.Logf("runtime role: %d of %d tampering statements succeeded", succeeded, len(tamper))
	// Nor can it make objects of its own beside the records.
	if _, err := app.Pool.Exec(ctx, `CREATE TABLE checks_shadow (id int)`); err == nil {
		t.Error("the runtime role created a table in schema public")
	}

	// TRUNCATE of every append-only table is refused even for the owner.
	for _, table := range []string{"checks", "baselines", "audit_log", "raw_data"} {
		if _, err := owner.Pool.Exec(ctx, "TRUNCATE "+table+" CASCADE"); err == nil {
			t.Errorf("TRUNCATE %s succeeded as the owner", table)
		}
	}
	var n int
	if err := owner.Pool.QueryRow(ctx, `SELECT count(*) FROM checks WHERE note = ''`).Scan(&n); err != nil || n != 1 {
		t.Errorf("checks after tampering: %d unchanged (err %v), want 1", n, err)
	}
}

// A runtime role meeting a schema with a pending migration is told to
// migrate with the owner's URL; with nothing pending it starts.
func TestRuntimeRoleMigrateChangesNothing(t *testing.T) {
	_, appURL, _ := runtimeRole(t)
	if err := db.Migrate(context.Background(), appURL, nil); err != nil {
		t.Fatalf("migrate as the runtime role with nothing pending: %v", err)
	}
}

func mustRole(t *testing.T, d *db.DB) db.RoleInfo {
	t.Helper()
	r, err := d.Role(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func pgErrorAs(err error, pe **pgconn.PgError) bool {
	for err != nil {
		if p, ok := err.(*pgconn.PgError); ok {
			*pe = p
			return true
		}
		u, ok := err.(interface{ Unwrap() error })
		if !ok {
			return false
		}
		err = u.Unwrap()
	}
	return false
}

func ptr[T any](v T) *T { return &v }
