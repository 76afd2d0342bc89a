package localpg

import (
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"
)

// The private cluster asks for a password: a superuser login without one is
// refused (on TCP and on the unix socket), the password files are 0600, and
// when the tests run as root another OS user ("nobody") can neither read the
// password nor log in as the superuser with psql. PostgreSQL documentation,
// "Client Authentication" (pg_hba.conf, scram-sha-256).
func TestSuperuserNeedsThePassword(t *testing.T) {
	ctx := testContext(t)
	dir := testDir(t)
	c := mustOpen(t, ctx, dir, withNoSync())

	conn := mustConnect(t, ctx, c.URL("postgres"))
	var method string
	if err := conn.QueryRow(ctx, `SELECT string_agg(DISTINCT auth_method, ',') FROM pg_hba_file_rules`).Scan(&method); err != nil {
		t.Fatal(err)
	}
	if method != "scram-sha-256" {
		t.Errorf("pg_hba methods %q, want only scram-sha-256", method)
	}
	if _, err := pgx.Connect(ctx, clusterURL(c.Port, "postgres")); err == nil || !strings.Contains(err.Error(), "password") {
		t.Errorf("superuser login without a password: %v, want a password failure", err)
	}
	if _, err := c.AppPassword(); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{superuserPasswordFile, appPasswordFile} {
		fi, err := os.Stat(filepath.Join(dir, f))
		if err != nil {
			t.Fatal(err)
		}
		if fi.Mode().Perm() != 0o600 {
			t.Errorf("%s mode %v, want 0600", f, fi.Mode().Perm())
		}
	}

	if os.Geteuid() != 0 {
		return
	}
	nobody, err := user.Lookup("nobody")
	if err != nil {
		t.Fatalf("no OS user nobody to try a login from: %v", err)
	}
	if uid, _ := strconv.Atoi(nobody.Uid); uid == 0 {
		t.Fatal("nobody is root")
	}
	psql, err := exec.LookPath("psql")
	if err != nil {
		psql = filepath.Join(c.bin, "psql")
	}
	out, err := exec.Command("runuser", "-u", "nobody", "--", "cat", filepath.Join(dir, superuserPasswordFile)).CombinedOutput()
	if err == nil {
		t.Errorf("another OS user read the superuser password: %s", out)
	}
	args := []string{"-u", "nobody", "--", psql, "-w", "-h", "127.0.0.1", "-p", strconv.Itoa(c.Port), "-U", Superuser, "-d", "postgres", "-c", "SELECT 1"}
	out, err = exec.Command("runuser", args...).CombinedOutput()
	if err == nil {
		t.Errorf("another OS user logged in as the superuser: %s", out)
	} else {
		t.Logf("superuser login from OS user nobody refused: %s", strings.TrimSpace(string(out)))
	}
}

// A cluster made with trust authentication (before passwords) is moved to
// SCRAM at its next Open: a new 0600 password file, pg_hba.conf without
// trust, and a login without the password refused.
func TestTrustClusterMovesToPasswords(t *testing.T) {
	ctx := testContext(t)
	dir := testDir(t)
	c := mustOpen(t, ctx, dir, withNoSync())
	if err := c.shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	legacy := "local all all trust\nhost all all 127.0.0.1/32 trust\nhost all all ::1/128 trust\n"
	hba := filepath.Join(c.pgdata, "pg_hba.conf")
	if err := os.WriteFile(hba, []byte(legacy), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := c.run.chown(hba); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(filepath.Join(dir, superuserPasswordFile)); err != nil {
		t.Fatal(err)
	}
	c2 := mustOpen(t, ctx, dir, withNoSync())
	if c2.superPassword == "" {
		t.Fatal("no superuser password after Open of a trust cluster")
	}
	fi, err := os.Stat(filepath.Join(dir, superuserPasswordFile))
	if err != nil || fi.Mode().Perm() != 0o600 {
		t.Fatalf("password file: %v %v", fi, err)
	}
	b, _ := os.ReadFile(hba)
	if strings.Contains(string(b), "trust") {
		t.Errorf("pg_hba.conf still trusts: %s", b)
	}
	if _, err := pgx.Connect(ctx, clusterURL(c2.Port, "postgres")); err == nil {
		t.Error("a login without the password succeeded after the move")
	}
	conn := mustConnect(t, ctx, c2.URL("postgres"))
	if err := conn.Ping(ctx); err != nil {
		t.Fatal(err)
	}
}
