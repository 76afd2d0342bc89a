package db_test

import (
	"context"
	"crypto/subtle"
	"encoding/base64"
	"fmt"
	"strings"
	"testing"
	"time"

	"golang.org/x/crypto/argon2"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func openTestDB(t *testing.T) *db.DB {
	t.Helper()
	d := dbtest.Open(t)
	return d
}

// The stored hash is a PHC argon2id string whose key the reference
// implementation (golang.org/x/crypto/argon2, RFC 9106) recomputes from the
// password, salt and stored parameters.
func TestPasswordHashIsArgon2idPHC(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	u, err := d.CreateUser(ctx, halfmark.CLIActor("test"), " A.Physicist@Example.org ", halfmark.RolePhysicist, "correct horse battery")
	if err != nil {
		t.Fatal(err)
	}
	if u.Email != "a.physicist@example.org" {
		t.Errorf("email stored as %q; want it trimmed and lower-cased", u.Email)
	}
	var enc string
	if err := d.Pool.QueryRow(ctx, `SELECT password_hash FROM users WHERE id = $1`, u.ID).Scan(&enc); err != nil {
		t.Fatal(err)
	}
	parts := strings.Split(enc, "$")
	if len(parts) != 6 || parts[1] != "argon2id" || parts[2] != fmt.Sprintf("v=%d", argon2.Version) {
		t.Fatalf("hash %q is not a PHC argon2id string", enc)
	}
	var m, tm uint32
	var p uint8
	if _, err := fmt.Sscanf(parts[3], "m=%d,t=%d,p=%d", &m, &tm, &p); err != nil {
		t.Fatal(err)
	}
	// RFC 9106 §4, second recommended option: m = 2^16 KiB, t = 3, p = 4.
	if m != 1<<16 || tm != 3 || p != 4 {
		t.Errorf("parameters m=%d t=%d p=%d; want RFC 9106 m=65536 t=3 p=4", m, tm, p)
	}
	salt, _ := base64.RawStdEncoding.DecodeString(parts[4])
	key, _ := base64.RawStdEncoding.DecodeString(parts[5])
	if len(salt) != 16 || len(key) != 32 {
		t.Errorf("salt %d bytes, key %d bytes; want 16 and 32", len(salt), len(key))
	}
	if subtle.ConstantTimeCompare(argon2.IDKey([]byte("correct horse battery"), salt, tm, m, p, 32), key) != 1 {
		t.Error("the stored key is not argon2id(password, salt, params)")
	}
	if strings.Contains(enc, "correct horse") {
		t.Error("the password appears in the stored hash")
	}
}

func TestCreateUserValidation(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	a := halfmark.CLIActor("test")
	_, err := d.CreateUser(ctx, a, "not-an-address", halfmark.Role("boss"), "short")
	var he *halfmark.Error
	if !asErr(err, &he) || he.Code != halfmark.EInvalid || len(he.Fields) != 3 {
		t.Fatalf("got %v; want EInvalid naming email, role and password", err)
	}
	if _, err := d.CreateUser(ctx, a, "t@example.org", halfmark.RoleTherapist, "long enough pass"); err != nil {
		t.Fatal(err)
	}
	_, err = d.CreateUser(ctx, a, "T@example.org", halfmark.RoleAdmin, "long enough pass")
	if halfmark.ErrorCodeOf(err) != halfmark.EInvalid || !strings.Contains(err.Error(), "already has an account") {
		t.Fatalf("duplicate e-mail: got %v", err)
	}
}

func asErr(err error, he **halfmark.Error) bool {
	e, ok := err.(*halfmark.Error)
	*he = e
	return ok
}

// Five wrong passwords lock the account for 15 minutes (the lock-out rule
// the dashboard promises; common practice); the right password is refused
// while locked and accepted after the lock ends.
func TestLockOutAfterFiveFailures(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	now := time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC)
	d.Now = func() time.Time { return now }
	if _, err := d.CreateUser(ctx, halfmark.CLIActor("test"), "p@example.org", halfmark.RolePhysicist, "right password"); err != nil {
		t.Fatal(err)
	}
	if _, err := d.AuthenticateUser(ctx, "nobody@example.org", "x"); halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
		t.Fatalf("unknown user: got %v; want EUnauthorized", err)
	}
	for i := 1; i <= 4; i++ {
		if _, err := d.AuthenticateUser(ctx, "p@example.org", "wrong"); halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
			t.Fatalf("failure %d: got %v; want EUnauthorized", i, err)
		}
	}
	if _, err := d.AuthenticateUser(ctx, "p@example.org", "wrong"); halfmark.ErrorCodeOf(err) != halfmark.EForbidden {
		t.Fatalf("fifth failure: got %v; want EForbidden (locked)", err)
	}
	if _, err := d.AuthenticateUser(ctx, "p@example.org", "right password"); halfmark.ErrorCodeOf(err) != halfmark.EForbidden {
		t.Fatalf("right password while locked: got %v; want EForbidden", err)
	}
	now = now.Add(14*time.Minute + 59*time.Second)
	if _, err := d.AuthenticateUser(ctx, "p@example.org", "right password"); halfmark.ErrorCodeOf(err) != halfmark.EForbidden {
		t.Fatalf("right password 14:59 later: got %v; want still locked", err)
	}
	now = now.Add(2 * time.Second)
	u, err := d.AuthenticateUser(ctx, "P@example.org", "right password")
	if err != nil || u.Role != halfmark.RolePhysicist {
		t.Fatalf("after the lock: got %v, %v", u, err)
	}
	ents, err := d.Audit(ctx, "user", fmt.Sprint(u.ID), 10)
	if err != nil {
		t.Fatal(err)
	}
	var locks int
	for _, e := range ents {
		if e.Action == "lock" {
			locks++
		}
	}
	if locks != 1 {
		t.Errorf("%d lock rows in the audit log; want 1", locks)
	}
	// A success resets the counter: four more failures do not lock.
	for i := 0; i < 4; i++ {
		_, _ = d.AuthenticateUser(ctx, "p@example.org", "wrong")
	}
	if _, err := d.AuthenticateUser(ctx, "p@example.org", "right password"); err != nil {
		t.Fatalf("after 4 failures: %v; want accepted", err)
	}
}

func TestSessionsExpire(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	now := time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC)
	d.Now = func() time.Time { return now }
	u, err := d.CreateUser(ctx, halfmark.CLIActor("test"), "t@example.org", halfmark.RoleTherapist, "right password")
	if err != nil {
		t.Fatal(err)
	}
	tok, err := d.CreateSession(ctx, u.ID)
	if err != nil {
		t.Fatal(err)
	}
	var stored []byte
	if err := d.Pool.QueryRow(ctx, `SELECT token_sha256 FROM sessions`).Scan(&stored); err != nil || len(stored) != 32 {
		t.Fatalf("session row: %v (%d bytes); want a 32-byte SHA-256", err, len(stored))
	}
	idle, maxAge := 12*time.Hour, 7*24*time.Hour
	for i := 0; i < 3; i++ { // used every 11 h: stays alive past 12 h in total
		now = now.Add(11 * time.Hour)
		if got, err := d.SessionUser(ctx, tok, idle, maxAge); err != nil || got.ID != u.ID {
			t.Fatalf("use %d: %v", i, err)
		}
	}
	now = now.Add(12*time.Hour + time.Second)
	if _, err := d.SessionUser(ctx, tok, idle, maxAge); halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
		t.Fatalf("idle 12 h: got %v; want EUnauthorized", err)
	}
	tok2, _ := d.CreateSession(ctx, u.ID)
	if err := d.EndSession(ctx, tok2); err != nil {
		t.Fatal(err)
	}
	if _, err := d.SessionUser(ctx, tok2, idle, maxAge); halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
		t.Fatalf("after sign-out: got %v", err)
	}
	if _, err := d.SessionUser(ctx, "forged", idle, maxAge); halfmark.ErrorCodeOf(err) != halfmark.EUnauthorized {
		t.Fatalf("forged token: got %v", err)
	}
}

func TestSignReport(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	m := halfmark.Machine{Name: "Linac A"}
	if err := d.CreateMachine(ctx, halfmark.CLIActor("test"), &m); err != nil {
		t.Fatal(err)
	}
	ther := halfmark.Actor{Name: "t@example.org", Role: halfmark.RoleTherapist}
	if err := d.SignReport(ctx, ther, m.ID, "2026-03", ""); halfmark.ErrorCodeOf(err) != halfmark.EForbidden {
		t.Fatalf("therapist: got %v", err)
	}
	phys := halfmark.Actor{Name: "p@example.org", Role: halfmark.RolePhysicist, UserID: 7}
	if err := d.SignReport(ctx, phys, m.ID, "March", ""); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
		t.Fatalf("bad month: got %v", err)
	}
	if err := d.SignReport(ctx, phys, m.ID, "2026-03", "reviewed"); err != nil {
		t.Fatal(err)
	}
	ents, err := d.Audit(ctx, "report", halfmark.ReportEntityID(m.ID, "2026-03"), 5)
	if err != nil || len(ents) != 1 || ents[0].Actor != "p@example.org" || ents[0].Action != "sign" {
		t.Fatalf("audit: %+v, %v", ents, err)
	}
}
