package main

import (
	"bufio"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"halfmark/db/dbtest"
)

// buildBinary compiles halfmark once per test run.
func buildBinary(t testing.TB) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "halfmark")
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// An import killed with SIGKILL in the middle leaves only whole batches
// (each batch of 1,000 checks is one transaction: all there or none), and
// running the import again completes it without duplicates.
func TestImportKilledMidwayKeepsWholeBatches(t *testing.T) {
	if testing.Short() {
		t.Skip("kill test skipped in -short mode")
	}
	url := dbtest.New(t)
	bin := buildBinary(t)
	p := writeCSV(t, 12000, nil) // 48,000 rows, 12 batches
	cmd := exec.Command(bin, "import", "checks", "--create-missing", p)
	cmd.Env = append(os.Environ(), "HALFMARK_DATABASE_URL="+url)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	sc := bufio.NewScanner(stderr)
	sc.Split(func(data []byte, atEOF bool) (int, []byte, error) { // progress lines end in \r
		for i, b := range data {
			if b == '\r' || b == '\n' {
				return i + 1, data[:i], nil
			}
		}
		if atEOF && len(data) > 0 {
			return len(data), data, nil
		}
		return 0, nil, nil
	})
	killed := false
	for sc.Scan() {
		if strings.HasPrefix(sc.Text(), "storing: 3000/") {
			_ = cmd.Process.Signal(syscall.SIGKILL)
			killed = true
			break
		}
	}
	_ = cmd.Wait()
	if !killed {
		t.Fatal("the import finished before it could be killed")
	}
	n := count(t, url, "SELECT count(*) FROM checks")
	if n%1000 != 0 || n >= 12000 {
		t.Fatalf("after SIGKILL %d checks are stored: a batch was half written, or nothing was interrupted", n)
	}
	t.Logf("killed after %d checks", n)
	code, out, stderrText := runCLI(t, url, "import", "checks", p)
	if code != 0 {
		t.Fatalf("re-run: %d %s %s", code, out, stderrText)
	}
	if n := count(t, url, "SELECT count(*) FROM checks"); n != 12000 {
		t.Fatalf("after the re-run %d checks, want 12000", n)
	}
	if n := count(t, url, "SELECT sum(jsonb_array_length(edges))::int FROM checks"); n != 48000 {
		t.Fatalf("%d edge results, want 48000", n)
	}
}
