package main

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// The private cluster serves as the runtime role: /readyz carries no
// append-only warning, and the password files are 0600.
func TestServeOnPrivateClusterUsesTheRuntimeRole(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a private cluster")
	}
	dir := t.TempDir()
	addr, stop := startServe(t, dir)
	defer stop()
	resp, err := http.Get("http://" + addr + "/readyz")
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || strings.Contains(string(b), "warning") {
		t.Errorf("/readyz on the private cluster: %d %s; want ready without a warning", resp.StatusCode, b)
	}
	for _, f := range []string{"superuser.password", "app.password"} {
		fi, err := os.Stat(filepath.Join(dir, "halfmark-data", f))
		if err != nil || fi.Mode().Perm() != 0o600 {
			t.Errorf("%s: %v %v; want mode 0600", f, fi, err)
		}
	}
}

// A service connected as a superuser says so at start and in /readyz
// ("append-only not enforced against this role"), and refuses to start
// when HALFMARK_REQUIRE_RUNTIME_ROLE=1.
func TestSuperuserConnectionWarnsOrIsRefused(t *testing.T) {
	url, _ := migratedStore(t)
	env := func(require string) func(string) string {
		return func(k string) string {
			switch k {
			case "HALFMARK_DATABASE_URL":
				return url
			case "HALFMARK_REQUIRE_RUNTIME_ROLE":
				return require
			}
			return ""
		}
	}
	var out, errb bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	code := run(ctx, []string{"halfmark", "api", "--addr", "127.0.0.1:0"}, env("1"), strings.NewReader(""), &out, &errb)
	if code == 0 || !strings.Contains(errb.String(), "append-only not enforced against this role") {
		t.Errorf("HALFMARK_REQUIRE_RUNTIME_ROLE=1 with a superuser URL: exit %d, %s", code, errb.String())
	}

	ctx2, stop := context.WithCancel(context.Background())
	var out2, errb2 syncBuffer
	done := make(chan int)
	go func() {
		done <- run(ctx2, []string{"halfmark", "api", "--addr", "127.0.0.1:0"}, env(""), strings.NewReader(""), &out2, &errb2)
	}()
	defer func() { stop(); <-done }()
	addr := ""
	for i := 0; i < 300 && addr == ""; i++ {
		if m := listeningRE.FindStringSubmatch(out2.String()); m != nil {
			addr = m[1]
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	if addr == "" {
		t.Fatalf("api printed no listening address: %s", errb2.String())
	}
	var body []byte
	for i := 0; i < 300; i++ {
		resp, err := http.Get("http://" + addr + "/readyz")
		if err == nil {
			body, _ = io.ReadAll(resp.Body)
			resp.Body.Close()
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	if !strings.Contains(string(body), "append-only not enforced against this role") {
		t.Errorf("/readyz as a superuser: %s; want the append-only warning", body)
	}
	if !strings.Contains(errb2.String(), "append-only not enforced against this role") {
		t.Errorf("no warning at start: %s", errb2.String())
	}
}
