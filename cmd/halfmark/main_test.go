package main

import (
	"net"

	"bytes"
	"context"
	"fmt"
	"github.com/emersion/go-smtp"
	"halfmark/db"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// runCLI runs the command line against url and returns its exit code and
// output.
func runCLI(t *testing.T, url string, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	getenv := func(k string) string {
		if k == "HALFMARK_DATABASE_URL" {
			return url
		}
		return ""
	}
	code := run(context.Background(), append([]string{"halfmark"}, args...), getenv, strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

func count(t *testing.T, url, q string) int {
	t.Helper()
	d, err := db.Open(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	var n int
	if err := d.Pool.QueryRow(context.Background(), q).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

func TestTokenCreatePrintsSecretAloneOnLastLine(t *testing.T) {
	url := dbtest.New(t)
	code, out, stderr := runCLI(t, url, "token", "create", "--name", "console-a", "--role", "therapist")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	last := lines[len(lines)-1]
	if !regexp.MustCompile(`^hm_[A-Za-z0-9_-]{43}$`).MatchString(last) {
		t.Fatalf("last line %q is not the token alone", last)
	}
	if n := count(t, url, "SELECT count(*) FROM tokens WHERE name = 'console-a' AND role = 'therapist'"); n != 1 {
		t.Fatalf("%d tokens stored", n)
	}
	if n := count(t, url, fmt.Sprintf("SELECT count(*) FROM tokens WHERE secret_sha256 = sha256('%s'::bytea)", last)); n != 1 {
		t.Fatal("the token is not stored as its SHA-256 hash")
	}
	if code, _, _ := runCLI(t, url, "token", "create", "--name", "x", "--role", "boss"); code != 2 {
		t.Fatalf("a bad role must be a usage error (2), got %d", code)
	}
}

// writeCSV writes n checks of four jaw edges each (4n rows); bad lists
// 1-based data-row numbers to spoil.
func writeCSV(t *testing.T, n int, bad map[int]string) string {
	t.Helper()
	var b strings.Builder
	b.WriteString("# morning checks exported from the old log\n")
	b.WriteString("machine,beam,kind,measured_at,ssd_cm,depth_cm,field_x_cm,field_y_cm,edge,position_mm,penumbra_mm,operator\n")
	start := time.Date(2015, 1, 1, 7, 30, 0, 0, time.UTC)
	row := 0
	for i := 0; i < n; i++ {
		at := start.Add(time.Duration(i) * 3 * time.Hour).Format(time.RFC3339)
		for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
			row++
			line := fmt.Sprintf("Linac Aster,6 MV,morning,%s,100,10,10,10,%s,%.2f,3.1,R. Quill", at, e, 55.0+float64(i%9)*0.02)
			if repl, ok := bad[row]; ok {
				line = repl
			}
			b.WriteString(line + "\n")
		}
	}
	p := filepath.Join(t.TempDir(), "log.csv")
	if err := os.WriteFile(p, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestImportRefusesFileWithThreeBadRowsAndNamesTheirLines(t *testing.T) {
	url := dbtest.New(t)
	// Data row k is on file line k+2 (a comment line and the header first).
	bad := map[int]string{
		5:  "Linac Aster,6 MV,morning,2015-01-01T07:30:00Z,100,10,10,10,X7,55,3.1,R. Quill",
		17: "Linac Aster,6 MV,morning,2015-01-03T07:30:00Z,100,10,10,10,Y1,55,-3.1,R. Quill",
		42: "Linac Aster,6 MV,morning,not-a-date,100,10,10,10,Y1,55,3.1,R. Quill",
	}
	p := writeCSV(t, 20, bad)
	code, out, stderr := runCLI(t, url, "import", "checks", "--create-missing", p)
	if code != 1 {
		t.Fatalf("exit %d, want 1\n%s\n%s", code, out, stderr)
	}
	for _, line := range []string{"line 7:", "line 19:", "line 44:"} {
		if !strings.Contains(out, line) {
			t.Errorf("output does not name %s\n%s", line, out)
		}
	}
	if strings.Count(out, "bad row:") != 3 {
		t.Errorf("want exactly 3 bad rows listed:\n%s", out)
	}
	if n := count(t, url, "SELECT count(*) FROM checks"); n != 0 {
		t.Fatalf("a refused import stored %d checks", n)
	}
	// --skip-bad stores the 17 untouched checks and lists the three rows.
	code, out, stderr = runCLI(t, url, "import", "checks", "--create-missing", "--skip-bad", p)
	if code != 0 {
		t.Fatalf("--skip-bad: exit %d\n%s\n%s", code, out, stderr)
	}
	if n := count(t, url, "SELECT count(*) FROM checks"); n != 20 {
		// Checks with one bad row still store their three good edges.
		t.Fatalf("--skip-bad stored %d checks, want 20", n)
	}
	if n := count(t, url, "SELECT sum(jsonb_array_length(edges))::int FROM checks"); n != 77 {
		t.Fatalf("--skip-bad stored %d edge results, want 80 − 3 = 77", n)
	}
}

func TestImport100kRowsShowsProgressAndIsIdempotent(t *testing.T) {
	if testing.Short() {
		t.Skip("100,000-row import skipped in -short mode")
	}
	url := dbtest.New(t)
	p := writeCSV(t, 25000, nil) // 100,000 rows
	code, out, stderr := runCLI(t, url, "import", "checks", "--create-missing", p)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, stderr)
	}
	if !strings.Contains(stderr, "storing: 25000/25000 checks (100%)") || !strings.Contains(stderr, "storing: 1000/25000") {
		t.Errorf("no progress shown:\n%s", stderr)
	}
	if !strings.Contains(out, "imported: 25000 new checks, 0 already stored") {
		t.Errorf("summary: %s", out)
	}
	if n := count(t, url, "SELECT sum(jsonb_array_length(edges))::int FROM checks"); n != 100000 {
		t.Fatalf("%d edge results stored, want 100000", n)
	}
	code, out, stderr = runCLI(t, url, "import", "checks", p)
	if code != 0 || !strings.Contains(out, "imported: 0 new checks, 25000 already stored") {
		t.Fatalf("re-run: exit %d\n%s\n%s", code, out, stderr)
	}
	if n := count(t, url, "SELECT count(*) FROM checks"); n != 25000 {
		t.Fatalf("re-run changed the store: %d checks", n)
	}
}

// migratedStore gives a throw-away database with the schema applied.
func migratedStore(t *testing.T) (string, *db.DB) {
	t.Helper()
	ctx := context.Background()
	url := dbtest.New(t)
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	return url, d
}

// startMailbox runs an in-process SMTP server on loopback and returns its
// port.
func startMailbox(t *testing.T) (*mailbox, string) {
	t.Helper()
	box := &mailbox{}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	srv := smtp.NewServer(box)
	srv.Domain = "localhost"
	go func() { _ = srv.Serve(l) }()
	t.Cleanup(func() { srv.Close() })
	_, port, _ := net.SplitHostPort(l.Addr().String())
	return box, port
}
