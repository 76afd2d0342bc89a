package main

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"
)

// syncBuffer is a bytes.Buffer safe for a server goroutine and the test.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// listeningRE finds the address a server prints once it has bound its
// socket: tests pass --addr 127.0.0.1:0 and read the port the server chose,
// so no port is freed for another process to take in between.
var listeningRE = regexp.MustCompile(`listening on http://([0-9.]+:[0-9]+)`)

// startServe runs `halfmark serve` with no database URL in dir and waits
// for /readyz; the returned stop function sends the equivalent of Ctrl-C.
func startServe(t *testing.T, dir string) (addr string, stop func() string) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	var out, errb syncBuffer
	done := make(chan int)
	getenv := func(k string) string {
		if k == "HALFMARK_DATA_DIR" {
			return filepath.Join(dir, "halfmark-data")
		}
		return "" // no database URL: the private cluster
	}
	go func() {
		done <- run(ctx, []string{"halfmark", "serve", "--addr", "127.0.0.1:0"}, getenv, strings.NewReader(""), &out, &errb)
	}()
	deadline := time.Now().Add(90 * time.Second)
	for {
		if m := listeningRE.FindStringSubmatch(out.String()); m != nil {
			addr = m[1]
		}
		resp, err := http.Get("http://" + addr + "/readyz")
		if addr != "" && err == nil {
			resp.Body.Close()
			if resp.StatusCode == 200 {
				break
			}
		}
		select {
		case code := <-done:
			t.Fatalf("serve exited with %d before ready:\n%s\n%s", code, out.String(), errb.String())
		default:
		}
		if time.Now().After(deadline) {
			cancel()
			t.Fatalf("not ready after 90 s:\n%s\n%s", out.String(), errb.String())
		}
		time.Sleep(200 * time.Millisecond)
	}
	return addr, func() string {
		cancel()
		select {
		case code := <-done:
			if code != 0 {
				t.Errorf("serve exited with %d:\n%s", code, errb.String())
			}
		case <-time.After(60 * time.Second):
			t.Fatal("serve did not stop within 60 s of the interrupt")
		}
		return errb.String()
	}
}

// With no environment, serve creates ./halfmark-data, answers /readyz with
// 200, stops cleanly, and a second start reuses the same data.
func TestServeWithPrivateClusterKeepsDataBetweenRuns(t *testing.T) {
	dir := t.TempDir()
	_, stop := startServe(t, dir)
	stop()
	if _, err := os.Stat(filepath.Join(dir, "halfmark-data", "pgdata", "PG_VERSION")); err != nil {
		t.Fatalf("no cluster in the data dir: %v", err)
	}
	// Write something through the CLI (it starts the stopped cluster itself).
	getenv := func(k string) string {
		if k == "HALFMARK_DATA_DIR" {
			return filepath.Join(dir, "halfmark-data")
		}
		return ""
	}
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"halfmark", "token", "create", "--name", "kept", "--role", "admin"}, getenv, nil, &out, &errb); code != 0 {
		t.Fatalf("token create: %d %s", code, errb.String())
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	secret := lines[len(lines)-1]

	addr, stop := startServe(t, dir)
	defer stop()
	req, _ := http.NewRequest("GET", fmt.Sprintf("http://%s/api/v1/tokens", addr), nil)
	req.Header.Set("Authorization", "Bearer "+secret)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Fatalf("the token made between runs is not accepted after restart: %d", resp.StatusCode)
	}
}
