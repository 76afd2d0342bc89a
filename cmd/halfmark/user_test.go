package main

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func runCLIStdin(t *testing.T, url, stdin string, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	getenv := func(k string) string {
		if k == "HALFMARK_DATABASE_URL" {
			return url
		}
		return ""
	}
	code := run(context.Background(), append([]string{"halfmark"}, args...), getenv, strings.NewReader(stdin), &out, &errb)
	return code, out.String(), errb.String()
}

func TestUserAdd(t *testing.T) {
	url := dbtest.New(t)
	code, out, stderr := runCLIStdin(t, url, "a typed password\n", "user", "add", "--email", "P@Example.org", "--role", "physicist", "--password-stdin")
	if code != 0 || !strings.Contains(out, "p@example.org with role physicist") || strings.Contains(out, "a typed password") {
		t.Fatalf("exit %d, out %q, err %q", code, out, stderr)
	}
	code, out, stderr = runCLIStdin(t, url, "", "user", "add", "--email", "t@example.org", "--role", "therapist")
	if code != 0 {
		t.Fatalf("generated password: exit %d: %s", code, stderr)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	generated := lines[len(lines)-1]
	if len(generated) < halfmark.MinPasswordLength {
		t.Fatalf("generated password %q is shorter than %d", generated, halfmark.MinPasswordLength)
	}
	d, err := db.Open(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	if u, err := d.AuthenticateUser(context.Background(), "t@example.org", generated); err != nil || u.Role != halfmark.RoleTherapist {
		t.Fatalf("the printed password does not sign in: %v", err)
	}
	if u, err := d.AuthenticateUser(context.Background(), "p@example.org", "a typed password"); err != nil || u.Role != halfmark.RolePhysicist {
		t.Fatalf("the stdin password does not sign in: %v", err)
	}
	if code, _, _ := runCLIStdin(t, url, "", "user", "add", "--email", "x@example.org", "--role", "boss"); code != 2 {
		t.Fatalf("bad role: exit %d; want 2", code)
	}
	if code, _, stderr := runCLIStdin(t, url, "short\n", "user", "add", "--email", "y@example.org", "--role", "admin", "--password-stdin"); code != 1 || !strings.Contains(stderr, "at least") {
		t.Fatalf("short password: exit %d, %q", code, stderr)
	}
}
