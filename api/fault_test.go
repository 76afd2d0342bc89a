package api_test

import (
	"context"
	"fmt"
	"net/http"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/google/uuid"

	"halfmark"
	"halfmark/api"
	"halfmark/db"
	"halfmark/db/localpg"
)

// PostgreSQL is stopped and restarted while eight clients post checks, each
// retrying with the same id until it gets a 2xx. Every acknowledged check is
// stored exactly once, /readyz says not-ready while the database is down and
// recovers by itself, and the outage is answered with 503, never 500.
func TestDatabaseRestartLosesNoAcknowledgedCheck(t *testing.T) {
	if testing.Short() {
		t.Skip("fault test skipped in -short mode")
	}
	ctx := context.Background()
	dir := t.TempDir()
	cl, err := localpg.Open(ctx, dir, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = cl.Stop(context.Background()) }()
	if err := cl.EnsureDatabase(ctx, "halfmark"); err != nil {
		t.Fatal(err)
	}
	url := cl.URL("halfmark")
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	e := &env{t: t, db: d, tokens: map[halfmark.Role]string{}}
	srv := newHTTPServer(api.New(api.Services{Machines: d, Checks: d, Series: d, Auth: d, Audit: d, Pinger: d}))
	defer srv.Close()
	e.srv = srv
	_, secret, err := d.CreateToken(ctx, halfmark.CLIActor("t"), "fault", halfmark.RoleAdmin)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range []halfmark.Role{halfmark.RoleTherapist, halfmark.RoleAdmin} {
		e.tokens[r] = secret
	}
	var m, b struct{ ID int64 }
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Linac Brume"}`, 201, &m)
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", m.ID), halfmark.RoleAdmin, `{"energy_mv":10}`, 201, &b)

	const clients = 8
	var (
		mu       sync.Mutex
		acked    = map[string]int{}
		statuses = map[int]int{}
		stop     atomic.Bool
	)
	var wg sync.WaitGroup
	for c := 0; c < clients; c++ {
		wg.Add(1)
		go func(c int) {
			defer wg.Done()
			for i := 0; !stop.Load(); i++ {
				id := uuid.NewString()
				body := fmt.Sprintf(`{"id":%q,"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-02-%02dT%02d:%02d:%02dZ","edges":[{"edge":"X1","position_mm":%g},{"edge":"X2","position_mm":50}]}`,
					id, m.ID, b.ID, 1+c, (i/3600)%24, (i/60)%60, i%60, 50+float64(i%100)/100)
				deadline := time.Now().Add(90 * time.Second)
				for time.Now().Before(deadline) {
					req, _ := http.NewRequest("POST", srv.URL+"/api/v1/checks", strings.NewReader(body))
					req.Header.Set("Content-Type", "application/json")
					req.Header.Set("Authorization", "Bearer "+secret)
					resp, err := http.DefaultClient.Do(req)
					code := 0
					if err == nil {
						code = resp.StatusCode
						resp.Body.Close()
					}
					mu.Lock()
					statuses[code]++
					if code == 200 || code == 201 {
						acked[id]++
					}
					mu.Unlock()
					if code == 200 || code == 201 {
						break
					}
					time.Sleep(100 * time.Millisecond)
				}
				time.Sleep(20 * time.Millisecond)
			}
		}(c)
	}
	time.Sleep(1500 * time.Millisecond)
	if err := cl.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	readyDown := 0
	for i := 0; i < 10; i++ {
		resp, err := http.Get(srv.URL + "/readyz")
		if err == nil {
			if resp.StatusCode == 503 {
				readyDown++
			}
			resp.Body.Close()
		}
		time.Sleep(200 * time.Millisecond)
	}
	if readyDown == 0 {
		t.Error("/readyz never reported not-ready while PostgreSQL was down")
	}
	cl2, err := localpg.Open(ctx, dir, nil)
	if err != nil {
		stop.Store(true)
		t.Fatal(err)
	}
	defer func() { _ = cl2.Stop(context.Background()) }()
	if cl2.Port != cl.Port {
		t.Logf("restarted on port %d (was %d)", cl2.Port, cl.Port)
	}
	recovered := false
	for i := 0; i < 100 && !recovered; i++ {
		resp, err := http.Get(srv.URL + "/readyz")
		if err == nil {
			recovered = resp.StatusCode == 200
			resp.Body.Close()
		}
		time.Sleep(200 * time.Millisecond)
	}
	if !recovered {
		t.Error("/readyz did not recover after PostgreSQL came back")
	}
	time.Sleep(time.Second)
	stop.Store(true)
	wg.Wait()
	t.Logf("responses by status: %v", statuses)
	if statuses[500] > 0 {
		t.Errorf("%d requests got 500 during the outage; a database outage must be 503", statuses[500])
	}
	failed := 0
	for code, n := range statuses {
		if code != 200 && code != 201 {
			failed += n
		}
	}
	if failed == 0 {
		t.Error("no request failed: the outage was not exercised")
	}
	// The README's claim: refused with 503 during the outage. Every
	// refusal is a 503 (no 500, no other status, no dropped connection).
	if statuses[503] == 0 {
		t.Error("no 503 during the outage")
	}
	for code, n := range statuses {
		if code != 200 && code != 201 && code != 503 {
			t.Errorf("%d requests answered %d during the outage; want 503 (0 = no answer)", n, code)
		}
	}
	ids := make([]string, 0, len(acked))
	for id := range acked {
		ids = append(ids, id)
	}
	var stored, distinct int
	if err := d.Pool.QueryRow(ctx, `SELECT count(*), count(DISTINCT id) FROM checks WHERE id = ANY($1::uuid[])`, ids).Scan(&stored, &distinct); err != nil {
		t.Fatal(err)
	}
	var total int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM checks`).Scan(&total)
	if stored != len(ids) || distinct != len(ids) || total != len(ids) {
		t.Fatalf("acknowledged %d checks; stored %d (%d distinct), %d in all", len(ids), stored, distinct, total)
	}
}
