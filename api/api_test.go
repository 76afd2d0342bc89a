package api_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	neturl "net/url"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/api"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// env is a live API on a throw-away database with one machine, one beam
// and a token per role.
type env struct {
	t      testing.TB
	db     *db.DB
	owner  string // the database URL as its owner (benchmarks create tables)
	srv    *httptest.Server
	tokens map[halfmark.Role]string
	mach   int64
	beam   int64
	// metrics is /metrics on its own server (serve --metrics-addr).
	metrics *httptest.Server
}

func newEnv(t *testing.T) *env { return newBenchEnv(t) }

// newHTTPServer serves h on a loopback port.
func newHTTPServer(h http.Handler) *httptest.Server { return httptest.NewServer(h) }

func newBenchEnv(t testing.TB) *env {
	t.Helper()
	ctx := context.Background()
	owner := dbtest.New(t)
	d, err := db.Open(ctx, runtimeRoleURL(t, owner))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	e := &env{t: t, db: d, owner: owner, tokens: map[halfmark.Role]string{}}
	metrics := api.NewMetrics(d)
	e.srv = newHTTPServer(api.New(api.Services{Machines: d, Checks: d, Series: d, Auth: d, Audit: d, Pinger: d, Raw: d, Metrics: metrics, Penumbra: d}))
	t.Cleanup(e.srv.Close)
	e.metrics = newHTTPServer(api.MetricsHandler(metrics))
	t.Cleanup(e.metrics.Close)
	for _, r := range []halfmark.Role{halfmark.RoleTherapist, halfmark.RolePhysicist, halfmark.RoleAdmin} {
		_, s, err := d.CreateToken(ctx, halfmark.CLIActor("test"), "t-"+string(r), r)
		if err != nil {
			t.Fatal(err)
		}
		e.tokens[r] = s
	}
	var m struct{ ID int64 }
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Linac Aster","sad_cm":100,"mlc_leaf_pairs":60}`, 201, &m)
	e.mach = m.ID
	var b struct{ ID int64 }
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", m.ID), halfmark.RoleAdmin, `{"energy_mv":6,"fff":false}`, 201, &b)
	e.beam = b.ID
	return e
}

// runtimeRoleURL migrates the database at ownerURL as its owner and returns
// the URL of the runtime role the service uses in production, so that every
// API test runs with the service's own grants and nothing more.
func runtimeRoleURL(t testing.TB, ownerURL string) string {
	t.Helper()
	const role, pw = "halfmark_app_apitest", "apitest-password"
	if err := db.MigrateWith(context.Background(), ownerURL, db.MigrateOptions{AppRole: role, AppPassword: pw}, nil); err != nil {
		t.Fatal(err)
	}
	u, err := neturl.Parse(ownerURL)
	if err != nil {
		t.Fatal(err)
	}
	u.User = neturl.UserPassword(role, pw)
	return u.String()
}

// do sends a request with the role's token ("" role: no token).
func (e *env) do(method, path string, role halfmark.Role, body string) (int, http.Header, []byte) {
	e.t.Helper()
	req, _ := http.NewRequest(method, e.srv.URL+path, strings.NewReader(body))
	if body != "" {
		req.Header.Set("Content-Type", "application/json")
	}
	if role != "" {
		req.Header.Set("Authorization", "Bearer "+e.tokens[role])
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		e.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, resp.Header, b
}

func (e *env) mustDo(method, path string, role halfmark.Role, body string, want int, out any) {
	e.t.Helper()
	st, _, b := e.do(method, path, role, body)
	if st != want {
		e.t.Fatalf("%s %s: status %d, want %d: %s", method, path, st, want, b)
	}
	if out != nil {
		if err := json.Unmarshal(b, out); err != nil {
			e.t.Fatalf("%s %s: %v: %s", method, path, err, b)
		}
	}
}

func (e *env) count(table string) int {
	e.t.Helper()
	var n int
	if err := e.db.Pool.QueryRow(context.Background(), "SELECT count(*) FROM "+table).Scan(&n); err != nil {
		e.t.Fatal(err)
	}
	return n
}

// countEdges counts stored edge results.
func (e *env) countEdges() int {
	e.t.Helper()
	var n int
	if err := e.db.Pool.QueryRow(context.Background(), "SELECT coalesce(sum(jsonb_array_length(edges)), 0) FROM checks").Scan(&n); err != nil {
		e.t.Fatal(err)
	}
	return n
}

func (e *env) checkBody(id string, edges string) string {
	return fmt.Sprintf(`{"id":%q,"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-03-02T07:45:00Z",
		"setup":{"ssd_cm":100,"depth_cm":10,"field_x_cm":10,"field_y_cm":10},"edges":%s}`, id, e.mach, e.beam, edges)
}

type storedCheck struct {
	ID           string `json:"id"`
	SupersededBy string `json:"superseded_by"`
	Edges        []struct {
		Edge          string   `json:"edge"`
		PositionMM    float64  `json:"position_mm"`
		IsoPositionMM float64  `json:"iso_position_mm"`
		DeviationMM   *float64 `json:"deviation_mm"`
		SeriesID      int64    `json:"series_id"`
	} `json:"edges"`
}

// Projection to the isocentre plane, checked by hand: a 50% point measured
// 55.1 mm from the axis at SSD 100 cm, depth 10 cm, SAD 100 cm lies at
// 55.1 × 100 / (100 + 10) = 50.0909 mm in the isocentre plane
// (magnification by SAD/(SSD + d): similar triangles, common practice).
func TestProjectionToIsocentreMatchesHandCalculation(t *testing.T) {
	e := newEnv(t)
	var sc storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":55.1,"penumbra_mm":3.2},
		{"edge":"x2","position_mm":-1.0}]`), 201, &sc)
	if len(sc.Edges) != 2 {
		t.Fatalf("edges %+v", sc.Edges)
	}
	if got, want := sc.Edges[0].IsoPositionMM, 50.0909; math.Abs(got-want) > 1e-4 {
		t.Errorf("X1 iso position %.5f mm, hand calculation %.4f mm", got, want)
	}
	if got, want := sc.Edges[1].IsoPositionMM, -0.909091; math.Abs(got-want) > 1e-5 {
		t.Errorf("X2 iso position %.6f, want %.6f", got, want)
	}
	if sc.Edges[1].Edge != "X2" {
		t.Errorf("edge name not canonical: %q", sc.Edges[1].Edge)
	}
	if sc.Edges[0].PositionMM != 55.1 {
		t.Errorf("raw position not kept: %v", sc.Edges[0].PositionMM)
	}
	// Without SSD and depth the position is taken as already at the isocentre.
	body := fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-03-02T07:45:00Z","edges":[{"edge":"Y1","position_mm":50.3}]}`, e.mach, e.beam)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, body, 201, &sc)
	if sc.Edges[0].IsoPositionMM != 50.3 {
		t.Errorf("iso position without setup %v, want 50.3", sc.Edges[0].IsoPositionMM)
	}
}

func TestIdempotentReplayAndConflict(t *testing.T) {
	e := newEnv(t)
	id := "0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60"
	body := e.checkBody(id, `[{"edge":"X1","position_mm":55.1,"penumbra_mm":3.2}]`)
	var first, again storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, body, 201, &first)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, body, 200, &again)
	if first.ID != id || again.ID != id || len(again.Edges) != 1 {
		t.Fatalf("replay answered %+v, first %+v", again, first)
	}
	checks, edges, audits := e.count("checks"), e.countEdges(), e.count("audit_log")
	if checks != 1 || edges != 1 {
		t.Fatalf("after replay: %d checks, %d edge results; want 1, 1", checks, edges)
	}
	conflicting := e.checkBody(id, `[{"edge":"X1","position_mm":55.2,"penumbra_mm":3.2}]`)
	st, h, b := e.do("POST", "/api/v1/checks", halfmark.RoleTherapist, conflicting)
	if st != 409 || h.Get("Content-Type") != api.ProblemContentType {
		t.Fatalf("conflicting replay: %d %s %s", st, h.Get("Content-Type"), b)
	}
	if e.count("checks") != checks || e.countEdges() != edges || e.count("audit_log") != audits {
		t.Fatal("a conflicting replay wrote rows")
	}
}

// Every bad input is refused with a problem body that names the field, and
// writes nothing.
func TestBadInputIsRefusedAndNothingWritten(t *testing.T) {
	e := newEnv(t)
	future := time.Now().Add(48 * time.Hour).UTC().Format(time.RFC3339)
	ok := `{"edge":"X1","position_mm":50,"penumbra_mm":3}`
	good := func(repl map[string]string) string {
		m := map[string]string{
			"machine": fmt.Sprint(e.mach), "beam": fmt.Sprint(e.beam), "at": "2026-03-02T07:45:00Z",
			"setup": `{"ssd_cm":100,"depth_cm":10,"field_x_cm":10,"field_y_cm":10}`, "edges": "[" + ok + "]", "kind": "morning",
		}
		for k, v := range repl {
			m[k] = v
		}
		return fmt.Sprintf(`{"machine_id":%s,"beam_id":%s,"kind":%q,"measured_at":%q,"setup":%s,"edges":%s}`,
			m["machine"], m["beam"], m["kind"], m["at"], m["setup"], m["edges"])
	}
	cases := []struct {
		name   string
		body   string
		ctype  string
		status int
		field  string // a field the problem must name ("" for transport errors)
	}{
		{"unknown machine", good(map[string]string{"machine": "9999"}), "", 422, "machine_id"},
		{"unknown beam", good(map[string]string{"beam": "9999"}), "", 422, "beam_id"},
		{"unknown edge name", good(map[string]string{"edges": `[{"edge":"X3","position_mm":50}]`}), "", 422, "edges[0].edge"},
		{"NaN", good(map[string]string{"edges": `[{"edge":"X1","position_mm":NaN}]`}), "", 400, ""},
		{"Inf by overflow", good(map[string]string{"edges": `[{"edge":"X1","position_mm":1e999}]`}), "", 400, "edges.position_mm"},
		{"negative penumbra", good(map[string]string{"edges": `[{"edge":"X1","position_mm":50,"penumbra_mm":-0.1}]`}), "", 422, "edges[0].penumbra_mm"},
		{"penumbra over 30 mm", good(map[string]string{"edges": `[{"edge":"X1","position_mm":50,"penumbra_mm":30.5}]`}), "", 422, "edges[0].penumbra_mm"},
		{"position beyond 300 mm", good(map[string]string{"edges": `[{"edge":"X1","position_mm":-300.5}]`}), "", 422, "edges[0].position_mm"},
		{"field over 40 cm", good(map[string]string{"setup": `{"field_x_cm":41}`}), "", 422, "setup.field_x_cm"},
		{"SSD implausible", good(map[string]string{"setup": `{"ssd_cm":20,"depth_cm":10}`}), "", 422, "setup.ssd_cm"},
		{"depth implausible", good(map[string]string{"setup": `{"ssd_cm":100,"depth_cm":55}`}), "", 422, "setup.depth_cm"},
		{"measured in the future", good(map[string]string{"at": future}), "", 422, "measured_at"},
		{"bad kind", good(map[string]string{"kind": "weekly"}), "", 422, "kind"},
		{"no edges", good(map[string]string{"edges": `[]`}), "", 422, "edges"},
		{"missing position", good(map[string]string{"edges": `[{"edge":"X1"}]`}), "", 422, "edges[0].position_mm"},
		{"unknown field", strings.Replace(good(nil), `"kind"`, `"knd":1,"kind"`, 1), "", 400, "knd"},
		{"wrong type", good(map[string]string{"edges": `[{"edge":"X1","position_mm":"fifty"}]`}), "", 400, "edges.position_mm"},
		{"malformed JSON", `{"machine_id": 1,`, "", 400, ""},
		{"body over 1 MiB", good(map[string]string{"edges": "[" + strings.Repeat(ok+",", 30000) + ok + "]"}), "", 413, ""},
		{"wrong content type", good(nil), "text/plain", 415, ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			req, _ := http.NewRequest("POST", e.srv.URL+"/api/v1/checks", strings.NewReader(c.body))
			ct := c.ctype
			if ct == "" {
				ct = "application/json"
			}
			req.Header.Set("Content-Type", ct)
			req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleTherapist])
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			var p api.Problem
			raw, _ := io.ReadAll(resp.Body)
			if err := json.Unmarshal(raw, &p); err != nil {
				t.Fatalf("not JSON: %s", raw)
			}
			if resp.StatusCode != c.status || p.Status != c.status {
				t.Fatalf("status %d (body %d), want %d: %s", resp.StatusCode, p.Status, c.status, raw)
			}
			if got := resp.Header.Get("Content-Type"); got != api.ProblemContentType {
				t.Errorf("content type %q", got)
			}
			if p.Detail == "" || p.Type == "" || p.Title == "" {
				t.Errorf("problem lacks detail/type/title: %s", raw)
			}
			if c.field != "" {
				found := false
				for _, f := range p.Errors {
					if f.Field == c.field && f.Message != "" {
						found = true
					}
				}
				if !found {
					t.Errorf("problem does not name field %q: %s", c.field, raw)
				}
			}
		})
	}
	if n := e.count("checks") + e.count("series"); n != 0 {
		t.Fatalf("bad input wrote %d rows", n)
	}
	var audits int
	_ = e.db.Pool.QueryRow(context.Background(), "SELECT count(*) FROM audit_log WHERE entity = 'check'").Scan(&audits)
	if audits != 0 {
		t.Fatalf("bad input wrote %d audit rows", audits)
	}
}

func TestRoles(t *testing.T) {
	e := newEnv(t)
	var sc storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":55.1}]`), 201, &sc)
	series := sc.Edges[0].SeriesID
	baseline := `{"value_mm":50.0,"reason":"commissioning","valid_from":"2026-01-01T00:00:00Z"}`
	cases := []struct {
		method, path string
		role         halfmark.Role
		body         string
		want         int
	}{
		{"GET", "/api/v1/machines", "", "", 401},
		{"POST", "/api/v1/checks", "", e.checkBody("", `[{"edge":"X1","position_mm":55.1}]`), 401},
		{"POST", "/api/v1/machines", halfmark.RoleTherapist, `{"name":"B"}`, 403},
		{"POST", "/api/v1/machines", halfmark.RolePhysicist, `{"name":"B"}`, 403},
		{"POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"B"}`, 201},
		{"POST", fmt.Sprintf("/api/v1/series/%d/baselines", series), halfmark.RoleTherapist, baseline, 403},
		{"POST", fmt.Sprintf("/api/v1/series/%d/baselines", series), halfmark.RolePhysicist, baseline, 201},
		{"GET", "/api/v1/tokens", halfmark.RolePhysicist, "", 403},
		{"GET", "/api/v1/tokens", halfmark.RoleAdmin, "", 200},
		{"GET", "/api/v1/machines", halfmark.RoleTherapist, "", 200},
	}
	for _, c := range cases {
		st, h, b := e.do(c.method, c.path, c.role, c.body)
		if st != c.want {
			t.Errorf("%s %s as %q: %d, want %d: %s", c.method, c.path, c.role, st, c.want, b)
		}
		if st >= 400 && h.Get("Content-Type") != api.ProblemContentType {
			t.Errorf("%s %s: error without problem+json", c.method, c.path)
		}
	}
	// A bad token is 401 too.
	req, _ := http.NewRequest("GET", e.srv.URL+"/api/v1/machines", nil)
	req.Header.Set("Authorization", "Bearer hm_not-a-token")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != 401 {
		t.Errorf("unknown token: %d", resp.StatusCode)
	}
}

// A correction supersedes the old check; both are kept, the series shows the
// new value as its current point and the old one marked corrected (with the
// correcting check and its reason), and the audit log has both writes.
func TestSupersessionKeepsHistory(t *testing.T) {
	e := newEnv(t)
	var old, corr storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":56.1}]`), 201, &old)
	body := strings.Replace(e.checkBody("", `[{"edge":"X1","position_mm":55.1}]`), `"kind"`, fmt.Sprintf(`"supersedes":%q,"kind"`, old.ID), 1)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, body, 201, &corr)
	var got storedCheck
	e.mustDo("GET", "/api/v1/checks/"+old.ID, halfmark.RoleTherapist, "", 200, &got)
	if got.SupersededBy != corr.ID || got.Edges[0].PositionMM != 56.1 {
		t.Fatalf("old check after correction: %+v", got)
	}
	var pts struct {
		Points []halfmark.Point `json:"points"`
	}
	e.mustDo("GET", fmt.Sprintf("/api/v1/series/%d/points", corr.Edges[0].SeriesID), halfmark.RoleTherapist, "", 200, &pts)
	current, corrected := 0, 0
	for _, p := range pts.Points {
		switch {
		case p.CheckID == corr.ID && !p.Corrected:
			current++
		case p.CheckID == old.ID && p.Corrected && p.SupersededBy == corr.ID && p.CorrectionReason != "":
			corrected++
		}
	}
	if len(pts.Points) != 2 || current != 1 || corrected != 1 {
		t.Fatalf("series points %+v, want the correction and the old point marked corrected", pts.Points)
	}
	if e.count("checks") != 2 {
		t.Fatal("both versions must be kept")
	}
	var actions []string
	rows, _ := e.db.Pool.Query(context.Background(), "SELECT action FROM audit_log WHERE entity='check' ORDER BY id")
	for rows.Next() {
		var a string
		_ = rows.Scan(&a)
		actions = append(actions, a)
	}
	if strings.Join(actions, ",") != "record,correct" {
		t.Fatalf("audit actions %v", actions)
	}
	// A second correction of the same old check is refused: correct the newest.
	st, _, _ := e.do("POST", "/api/v1/checks", halfmark.RoleTherapist, strings.Replace(body, "55.1", "55.0", 1))
	if st != 409 {
		t.Fatalf("second correction of one check: %d, want 409", st)
	}
	// The database itself refuses to change a stored check.
	if _, err := e.db.Pool.Exec(context.Background(), "UPDATE checks SET operator = 'x'"); err == nil {
		t.Fatal("UPDATE on checks was allowed")
	}
	if _, err := e.db.Pool.Exec(context.Background(), "DELETE FROM audit_log"); err == nil {
		t.Fatal("DELETE on audit_log was allowed")
	}
}

// The deviation is iso position − baseline in force at the check's time.
func TestDeviationFromBaseline(t *testing.T) {
	e := newEnv(t)
	var sc storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":55.1}]`), 201, &sc)
	if sc.Edges[0].DeviationMM != nil {
		t.Fatal("deviation without a baseline")
	}
	e.mustDo("POST", fmt.Sprintf("/api/v1/series/%d/baselines", sc.Edges[0].SeriesID), halfmark.RolePhysicist,
		`{"value_mm":50.0,"sigma_mm":0.2,"reason":"commissioning","valid_from":"2026-01-01T00:00:00Z"}`, 201, nil)
	e.mustDo("GET", "/api/v1/checks/"+sc.ID, halfmark.RoleTherapist, "", 200, &sc)
	// 55.1·100/110 − 50.0 = 0.0909 mm (hand calculation).
	if sc.Edges[0].DeviationMM == nil || math.Abs(*sc.Edges[0].DeviationMM-0.090909) > 1e-5 {
		t.Fatalf("deviation %v, want 0.0909", sc.Edges[0].DeviationMM)
	}
}

func TestBatchIsAllOrNothing(t *testing.T) {
	e := newEnv(t)
	var checks []string
	for i := 0; i < 20; i++ {
		pos := 50.0 + float64(i)/10
		if i == 13 {
			pos = 400 // beyond ±300 mm
		}
		checks = append(checks, fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-03-%02dT07:00:00Z","edges":[{"edge":"X1","position_mm":%g},{"edge":"X2","position_mm":50}]}`,
			e.mach, e.beam, i+1, pos))
	}
	st, _, b := e.do("POST", "/api/v1/checks/batch", halfmark.RoleTherapist, `{"checks":[`+strings.Join(checks, ",")+`]}`)
	if st != 422 || !bytes.Contains(b, []byte(`checks[13].edges[0].position_mm`)) {
		t.Fatalf("batch with one bad check: %d %s", st, b)
	}
	if e.count("checks") != 0 {
		t.Fatal("a refused batch wrote checks")
	}
	checks[13] = strings.Replace(checks[13], "400", "51.3", 1)
	var res halfmark.BatchResult
	e.mustDo("POST", "/api/v1/checks/batch", halfmark.RoleTherapist, `{"checks":[`+strings.Join(checks, ",")+`]}`, 201, &res)
	if res.Created != 20 || e.countEdges() != 40 {
		t.Fatalf("batch result %+v, %d edge rows", res, e.countEdges())
	}
	// A large batch leaves one audit row listing every id; asking the audit
	// log about one of its checks finds it.
	var big []string
	for i := 0; i < 30; i++ {
		big = append(big, fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-04-%02dT07:00:00Z","edges":[{"edge":"X1","position_mm":50}]}`,
			e.mach, e.beam, i+1))
	}
	e.mustDo("POST", "/api/v1/checks/batch", halfmark.RoleTherapist, `{"checks":[`+strings.Join(big, ",")+`]}`, 201, &res)
	var entries struct {
		Entries []halfmark.AuditEntry `json:"entries"`
	}
	e.mustDo("GET", "/api/v1/audit?entity=check&entity_id="+res.IDs[17], halfmark.RolePhysicist, "", 200, &entries)
	if len(entries.Entries) != 1 || entries.Entries[0].Action != "record-batch" || entries.Entries[0].Actor != "token:t-therapist" {
		t.Fatalf("audit for a check stored in a batch: %+v", entries.Entries)
	}
}

func TestHealthAndOpenAPI(t *testing.T) {
	e := newEnv(t)
	for _, p := range []string{"/healthz", "/readyz", "/api/v1/openapi.yaml"} {
		st, _, b := e.do("GET", p, "", "")
		if st != 200 {
			t.Errorf("%s: %d", p, st)
		}
		if p == "/api/v1/openapi.yaml" && !bytes.Contains(b, []byte("X = X1 + X2")) {
			t.Error("the OpenAPI text must state the edge convention")
		}
	}
}

// /metrics, on its own address, reports requests by route template and the
// checks and edge results ingested, in the Prometheus text format; the
// service address does not serve it.
func TestMetrics(t *testing.T) {
	e := newEnv(t)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":55.1},{"edge":"X2","position_mm":55}]`), 201, nil)
	if st, _, _ := e.do("GET", "/metrics", "", ""); st != 404 {
		t.Errorf("/metrics on the service address: %d; want 404", st)
	}
	resp, err := http.Get(e.metrics.URL + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || resp.Header.Get("X-Content-Type-Options") != "nosniff" {
		t.Fatalf("/metrics: %d, headers %v", resp.StatusCode, resp.Header)
	}
	for _, want := range []string{
		"halfmark_ingested_checks_total 1",
		"halfmark_ingested_edge_results_total 2",
		`halfmark_http_requests_total{method="POST",route="/api/v1/checks",status="201"} 1`,
		`halfmark_open_alerts{level="3"} 0`,
		"halfmark_outbox_backlog 0",
	} {
		if !bytes.Contains(b, []byte(want)) {
			t.Errorf("/metrics lacks %q", want)
		}
	}
}
