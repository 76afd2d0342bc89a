package main

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"os"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/google/uuid"

	"halfmark"
)

// The bounded load test: 50 clients post checks and 20 read the dashboard's
// front page for 60 s (HALFMARK_LOAD_SECONDS overrides) against the served
// handler on loopback. Every request but the deliberately bad ones (one
// post in 20 carries a negative penumbra) succeeds, every acknowledged
// check is stored once, and the latencies are reported.
func TestLoadPostAndFrontPage(t *testing.T) {
	if testing.Short() {
		t.Skip("load test skipped in -short mode")
	}
	dur := 60 * time.Second
	if s := os.Getenv("HALFMARK_LOAD_SECONDS"); s != "" {
		var n int
		fmt.Sscan(s, &n)
		dur = time.Duration(n) * time.Second
	}
	ctx := context.Background()
	d, _, srv := servedHandler(t)
	a := halfmark.CLIActor("load")
	var machines []halfmark.Machine
	var beams []int64
	for i := 0; i < 10; i++ {
		m := halfmark.Machine{Name: fmt.Sprintf("Linac %02d", i), SADcm: 100}
		if err := d.CreateMachine(ctx, a, &m); err != nil {
			t.Fatal(err)
		}
		b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
		if err := d.CreateBeam(ctx, a, &b); err != nil {
			t.Fatal(err)
		}
		machines, beams = append(machines, m), append(beams, b.ID)
	}
	_, tok, _ := d.CreateToken(ctx, a, "load", halfmark.RoleTherapist)
	u, _ := d.CreateUser(ctx, a, "reader@load.example", halfmark.RoleTherapist, "correct horse battery")
	sess, _ := d.CreateSession(ctx, u.ID)

	tr := &http.Transport{MaxIdleConnsPerHost: 100}
	client := &http.Client{Transport: tr, Timeout: 30 * time.Second, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	var (
		mu              sync.Mutex
		postLat, getLat []time.Duration
		acked           []string
		errs            []string
		bad             atomic.Int64
	)
	stop := time.Now().Add(dur)
	var wg sync.WaitGroup
	for c := 0; c < 50; c++ {
		wg.Add(1)
		go func(c int) {
			defer wg.Done()
			for i := 0; time.Now().Before(stop); i++ {
				id := uuid.NewString()
				pen := 3.1
				deliberate := i%20 == 19
				if deliberate {
					pen = -1
				}
				mi := (c + i) % len(machines)
				body := fmt.Sprintf(`{"id":%q,"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":%q,"edges":[{"edge":"X1","position_mm":50.1,"penumbra_mm":%g},{"edge":"X2","position_mm":49.9},{"edge":"Y1","position_mm":50},{"edge":"Y2","position_mm":50.2}]}`,
					id, machines[mi].ID, beams[mi], time.Now().Add(-time.Duration(c*1000+i)*time.Minute).UTC().Format(time.RFC3339), pen)
				req, _ := http.NewRequest("POST", srv.URL+"/api/v1/checks", strings.NewReader(body))
				req.Header.Set("Content-Type", "application/json")
				req.Header.Set("Authorization", "Bearer "+tok)
				t0 := time.Now()
				resp, err := client.Do(req)
				lat := time.Since(t0)
				mu.Lock()
				switch {
				case err != nil:
					errs = append(errs, err.Error())
				case deliberate && resp.StatusCode == 422:
					bad.Add(1)
				case !deliberate && resp.StatusCode == 201:
					acked = append(acked, id)
					postLat = append(postLat, lat)
				default:
					errs = append(errs, fmt.Sprintf("POST %d (deliberately bad: %v)", resp.StatusCode, deliberate))
				}
				mu.Unlock()
				if resp != nil {
					io.Copy(io.Discard, resp.Body)
					resp.Body.Close()
				}
			}
		}(c)
	}
	for r := 0; r < 20; r++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for time.Now().Before(stop) {
				req, _ := http.NewRequest("GET", srv.URL+"/", nil)
				req.AddCookie(&http.Cookie{Name: "hm_session", Value: sess})
				t0 := time.Now()
				resp, err := client.Do(req)
				lat := time.Since(t0)
				mu.Lock()
				if err != nil || resp.StatusCode != 200 {
					st := 0
					if resp != nil {
						st = resp.StatusCode
					}
					errs = append(errs, fmt.Sprintf("GET / %d %v", st, err))
				} else {
					getLat = append(getLat, lat)
				}
				mu.Unlock()
				if resp != nil {
					io.Copy(io.Discard, resp.Body)
					resp.Body.Close()
				}
			}
		}()
	}
	wg.Wait()
	if len(errs) > 0 {
		t.Errorf("%d errors, first: %v", len(errs), errs[:min(5, len(errs))])
	}
	var stored int
	if err := d.Pool.QueryRow(ctx, `SELECT count(*) FROM checks WHERE id = ANY($1::text[]::uuid[])`, acked).Scan(&stored); err != nil {
		t.Fatal(err)
	}
	var total int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM checks`).Scan(&total)
	if stored != len(acked) || total != len(acked) {
		t.Fatalf("%d checks acknowledged, %d of them stored, %d in all", len(acked), stored, total)
	}
	p := func(l []time.Duration, q float64) time.Duration {
		if len(l) == 0 {
			return 0
		}
		sort.Slice(l, func(i, j int) bool { return l[i] < l[j] })
		return l[int(q*float64(len(l)-1))]
	}
	t.Logf("LOAD %v: %d checks stored (%.0f/s), %d deliberate bad requests refused, %d front pages (%.0f/s); POST p50 %v p99 %v; GET / p50 %v p99 %v; errors %d",
		dur, len(acked), float64(len(acked))/dur.Seconds(), bad.Load(), len(getLat), float64(len(getLat))/dur.Seconds(),
		p(postLat, 0.5).Round(time.Millisecond), p(postLat, 0.99).Round(time.Millisecond),
		p(getLat, 0.5).Round(time.Millisecond), p(getLat, 0.99).Round(time.Millisecond), len(errs))
}
