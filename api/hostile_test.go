package api_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"mime/multipart"
	"net/http"
	"strings"
	"testing"

	"github.com/google/uuid"

	"halfmark"
	"halfmark/analysis/epid/synth"
	"halfmark/api"
)

// hostileCase is one hostile request and whether it may be stored (free
// text with SQL or path characters is legitimate input: it must be stored
// verbatim and harm nothing).
type hostileCase struct {
	name, path, ctype string
	body              []byte
	mayStore          bool
}

func jsonCases(e *env) []hostileCase {
	check := func(mut func(m map[string]any)) []byte {
		m := map[string]any{"machine_id": e.mach, "beam_id": e.beam, "kind": "morning", "measured_at": "2026-03-02T07:45:00Z",
			"setup": map[string]any{"ssd_cm": 100, "depth_cm": 10, "field_x_cm": 10, "field_y_cm": 10},
			"edges": []any{map[string]any{"edge": "X1", "position_mm": 50.1, "penumbra_mm": 3.2}}}
		mut(m)
		b, _ := json.Marshal(m)
		return b
	}
	var cs []hostileCase
	add := func(name, path string, body []byte, mayStore bool) {
		cs = append(cs, hostileCase{name: name, path: path, ctype: "application/json", body: body, mayStore: mayStore})
	}
	endpoints := []string{"/api/v1/checks", "/api/v1/checks/batch", "/api/v1/machines", fmt.Sprintf("/api/v1/machines/%d/beams", e.mach),
		"/api/v1/series/1/baselines", "/api/v1/tokens"}
	malformed := []string{``, `{`, `{"machine_id": 1,`, `[`, `{"a":1}}`, `{'kind':'morning'}`, `nul`, `"\u0000"`, `{"edges": [1,2,}`,
		`{"machine_id": 0x10}`, `{"machine_id": 1e}`, `{"kind": "morning"} {"kind": "annual"}`, "\x00\x01\x02", `{"edges":"` + strings.Repeat("\\", 1000) + `"}`}
	for _, ep := range endpoints {
		for i, m := range malformed {
			add(fmt.Sprintf("malformed %d on %s", i, ep), ep, []byte(m), false)
		}
		add("oversized on "+ep, ep, []byte(`{"note":"`+strings.Repeat("a", 2<<20)+`"}`), false)
		add("deep nesting on "+ep, ep, []byte(strings.Repeat("[", 100000)+strings.Repeat("]", 100000)), false)
		add("deep object nesting on "+ep, ep, []byte(strings.Repeat(`{"a":`, 20000)+"1"+strings.Repeat("}", 20000)), false)
		add("invalid UTF-8 on "+ep, ep, []byte("{\"name\":\"Linac \xff\xfe\"}"), false)
		add("array for object on "+ep, ep, []byte(`[{"name":"x"}]`), false)
	}
	// Every number field of a check: NaN, ±Infinity, overflow, a string, a
	// boolean, an object.
	numFields := []string{"machine_id", "beam_id", "setup.ssd_cm", "setup.depth_cm", "setup.field_x_cm", "setup.field_y_cm",
		"setup.collimator_deg", "setup.gantry_deg", "edges.0.position_mm", "edges.0.penumbra_mm", "edges.0.light_position_mm"}
	set := func(m map[string]any, path string, v any) {
		parts := strings.Split(path, ".")
		var cur any = m
		for i, p := range parts {
			last := i == len(parts)-1
			switch c := cur.(type) {
			case map[string]any:
				if last {
					c[p] = v
				} else {
					cur = c[p]
				}
			case []any:
				var k int
				fmt.Sscan(p, &k)
				if last {
					c[k] = v
				} else {
					cur = c[k]
				}
			}
		}
	}
	for _, f := range numFields {
		for _, lit := range []string{"NaN", "Infinity", "-Infinity", "1e999", "-1e999"} {
			b := check(func(m map[string]any) { set(m, f, "__LIT__") })
			b = bytes.Replace(b, []byte(`"__LIT__"`), []byte(lit), 1)
			add(f+" = "+lit, "/api/v1/checks", b, false)
		}
		for _, v := range []any{"12", true, map[string]any{}, []any{1}} {
			add(fmt.Sprintf("%s = %v (%T)", f, v, v), "/api/v1/checks", check(func(m map[string]any) { set(m, f, v) }), false)
		}
	}
	sqlish := []string{`'; DROP TABLE checks; --`, `1 OR 1=1`, `" OR ""="`, `$$; DELETE FROM audit_log; $$`, `../../etc/passwd`, `..\\..\\windows\\system32`, `%00`, `<script>alert(1)</script>`}
	for _, s := range sqlish {
		// Constrained fields refuse them.
		for _, f := range []string{"kind", "edges.0.edge", "id", "supersedes", "measured_at"} {
			add(fmt.Sprintf("%s = %q", f, s), "/api/v1/checks", check(func(m map[string]any) { set(m, f, s) }), false)
		}
		// Free text stores them verbatim.
		for _, f := range []string{"operator", "device", "note"} {
			add(fmt.Sprintf("free text %s = %q", f, s), "/api/v1/checks", check(func(m map[string]any) { set(m, f, s) }), true)
		}
		add(fmt.Sprintf("machine name %q", s), "/api/v1/machines", []byte(fmt.Sprintf(`{"name":%q}`, s)), true)
	}
	for _, ts := range []string{"0001-01-01T00:00:00Z", "1899-12-31T23:59:59Z", "9999-12-31T23:59:59Z", "2999-01-01T00:00:00Z",
		"2026-13-45T99:99:99Z", "yesterday", "2026-03-02", "+275760-09-13T00:00:00Z"} {
		add("measured_at "+ts, "/api/v1/checks", check(func(m map[string]any) { m["measured_at"] = ts }), false)
	}
	big := make([]any, 0, 60000)
	for i := 0; i < 60000; i++ {
		big = append(big, map[string]any{"edge": "X1", "position_mm": 1})
	}
	add("huge edges array", "/api/v1/checks", check(func(m map[string]any) { m["edges"] = big[:600] }), false)
	hugeBatch, _ := json.Marshal(map[string]any{"checks": big[:30000]})
	add("huge batch of junk", "/api/v1/checks/batch", hugeBatch, false)
	return cs
}

func rawCases() []hostileCase {
	g := synth.Default
	ar, ac := g.Axis()
	img, _ := synth.RTImage{Imager: g, Frames: [][]float64{synth.Field{X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1, Bg: 10, Amp: 1000}.Pixels(g, ar, ac)}}.Bytes()
	corrupt := append([]byte(nil), img...)
	for i := 140; i < 600; i += 7 { // the data-set header: tags, lengths, VRs
		corrupt[i] ^= 0xA5
	}
	var cs []hostileCase
	for _, ep := range []string{"/api/v1/analyze/image", "/api/v1/analyze/picket"} {
		for n, b := range map[string][]byte{"truncated": img[:len(img)/2], "header only": img[:300], "corrupted": corrupt,
			"empty": {}, "text": []byte("not a DICOM file"), "zeros": make([]byte, 4096), "DICM without data": append(make([]byte, 128), []byte("DICM")...)} {
			cs = append(cs, hostileCase{name: n + " on " + ep, path: ep, ctype: "application/dicom", body: b})
		}
	}
	garbage := make([]byte, 5000)
	for i := range garbage {
		garbage[i] = byte(i*7919 + 13)
	}
	var million strings.Builder
	for i := 0; i < 1_000_000; i++ {
		fmt.Fprintf(&million, "%d,%d\n", i-500000, 100)
	}
	for n, b := range map[string]string{"binary garbage": string(garbage), "NaN signal": "0,NaN\n1,2\n", "one sample": "0,1\n",
		"no field": strings.Repeat("1,0\n", 50), "10^6 samples": million.String(), "conflicting repeats": strings.Repeat("0,1\n0,100\n", 20)} {
		cs = append(cs, hostileCase{name: n, path: "/api/v1/analyze/profile", ctype: "text/csv", body: []byte(b)})
	}
	return cs
}

// The hostile corpus against the live API: every request gets a 4xx
// problem+json (never a 500, never a dropped connection), nothing is
// written except free text stored verbatim, and the server stays healthy.
func TestHostileInputCorpus(t *testing.T) {
	e := newEnv(t)
	tables := []string{"checks", "series", "baselines", "tokens", "beams"}
	before := map[string]int{}
	for _, tb := range tables {
		before[tb] = e.count(tb)
	}
	machinesBefore := e.count("machines")
	cases := append(jsonCases(e), rawCases()...)
	stored := 0
	for _, c := range cases {
		req, _ := http.NewRequest("POST", e.srv.URL+c.path, bytes.NewReader(c.body))
		req.Header.Set("Content-Type", c.ctype)
		req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleAdmin])
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Errorf("%s: connection error %v", c.name, err)
			continue
		}
		body, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if c.mayStore && resp.StatusCode < 300 {
			stored++
			continue
		}
		if resp.StatusCode < 400 || resp.StatusCode >= 500 {
			t.Errorf("%s: status %d, want 4xx: %.200s", c.name, resp.StatusCode, body)
			continue
		}
		if ct := resp.Header.Get("Content-Type"); ct != "application/problem+json" {
			t.Errorf("%s: content type %q", c.name, ct)
		}
		var p struct {
			Status int    `json:"status"`
			Detail string `json:"detail"`
		}
		if json.Unmarshal(body, &p) != nil || p.Status != resp.StatusCode || p.Detail == "" {
			t.Errorf("%s: not a problem body: %.200s", c.name, body)
		}
	}
	t.Logf("%d hostile requests, %d legitimate free-text requests stored verbatim", len(cases), stored)
	for _, tb := range tables {
		if tb == "checks" || tb == "series" {
			continue
		}
		if n := e.count(tb); n != before[tb] {
			t.Errorf("table %s: %d rows before, %d after", tb, before[tb], n)
		}
	}
	// Only the free-text cases wrote checks, and their text is stored exactly.
	var n int
	_ = e.db.Pool.QueryRow(context.Background(), `SELECT count(*) FROM checks WHERE operator LIKE '%DROP TABLE%' OR device LIKE '%DROP TABLE%' OR note LIKE '%DROP TABLE%'`).Scan(&n)
	if n != 3 {
		t.Errorf("%d checks hold the SQL-looking text verbatim, want 3", n)
	}
	if got := e.count("checks"); got != before["checks"]+stored-(e.count("machines")-machinesBefore) {
		t.Errorf("checks: %d before, %d after, %d free-text requests stored", before["checks"], got, stored)
	}
	st, _, _ := e.do("GET", "/healthz", "", "")
	st2, _, _ := e.do("GET", "/readyz", "", "")
	if st != 200 || st2 != 200 {
		t.Fatalf("server unhealthy after the corpus: healthz %d readyz %d", st, st2)
	}
}

// probeCase is one request of the outside probe that was wrongly accepted
// or answered 500; want is the status it must get now.
type probeCase struct {
	name, method, path, ctype string
	body                      []byte
	want                      int
}

// The outside probe's cases, each refused with a 4xx naming what to fix and
// writing nothing: corrections that would hide a check (another machine's
// check, itself, a cycle within a batch, one already corrected, one that
// does not exist, the same check twice), NUL bytes in free text (they
// reached PostgreSQL as SQLSTATE 22021 and gave 500), implausible baselines,
// dates, MLC leaves and layouts, look-alike machine names, an energy off the
// half-MV grid, trailing data after the check part of checks/raw, and a
// malformed check id. Afterwards no table has a row it did not have before.
func TestProbeCasesRefused(t *testing.T) {
	e := newEnv(t)
	ctx := context.Background()
	d := e.db
	srv := newHTTPServer(api.New(api.Services{Machines: d, Checks: d, Series: d, Auth: d, Audit: d, Pinger: d, Raw: d, Alerts: d, Events: d}))
	defer srv.Close()
	e.srv = srv

	var tern, heron, plover, tb, hb, pb struct{ ID int64 }
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Tern","mlc_leaf_pairs":60,"mlc_layout":"60"}`, 201, &tern)
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Heron","mlc_leaf_pairs":60,"mlc_layout":"10x10,40x5,10x10"}`, 201, &heron)
	e.mustDo("POST", "/api/v1/machines", halfmark.RoleAdmin, `{"name":"Plover"}`, 201, &plover)
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", tern.ID), halfmark.RoleAdmin, `{"energy_mv":6}`, 201, &tb)
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", heron.ID), halfmark.RoleAdmin, `{"energy_mv":6}`, 201, &hb)
	e.mustDo("POST", fmt.Sprintf("/api/v1/machines/%d/beams", plover.ID), halfmark.RoleAdmin, `{"energy_mv":6}`, 201, &pb)
	checkJSON := func(id string, m, b int64, supersedes, edges string) string {
		s := fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-03-02T07:45:00Z","edges":%s`, m, b, edges)
		if id != "" {
			s += fmt.Sprintf(`,"id":%q`, id)
		}
		if supersedes != "" {
			s += fmt.Sprintf(`,"supersedes":%q`, supersedes)
		}
		return s + "}"
	}
	x1 := `[{"edge":"X1","position_mm":50.1,"penumbra_mm":3.1}]`
	var ternCheck, corrected, correction storedCheck
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, checkJSON("", tern.ID, tb.ID, "", x1), 201, &ternCheck)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, checkJSON("", tern.ID, tb.ID, "", x1), 201, &corrected)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, checkJSON("", tern.ID, tb.ID, corrected.ID, x1), 201, &correction)
	var ss struct {
		Series []halfmark.Series `json:"series"`
	}
	e.mustDo("GET", fmt.Sprintf("/api/v1/machines/%d/series", tern.ID), halfmark.RoleTherapist, "", 200, &ss)
	var penumbra, position int64
	for _, s := range ss.Series {
		switch s.Quantity {
		case halfmark.QPenumbra:
			penumbra = s.ID
		case halfmark.QPosition:
			position = s.ID
		}
	}
	if penumbra == 0 || position == 0 {
		t.Fatalf("series of Tern: %+v", ss.Series)
	}
	a, b := uuid.NewString(), uuid.NewString()
	self := uuid.NewString()

	var cs []probeCase
	add := func(name, method, path, body string, want int) {
		cs = append(cs, probeCase{name: name, method: method, path: path, ctype: "application/json", body: []byte(body), want: want})
	}
	// Corrections.
	add("Heron check correcting a Tern check", "POST", "/api/v1/checks", checkJSON("", heron.ID, hb.ID, ternCheck.ID, x1), 422)
	add("a check correcting itself", "POST", "/api/v1/checks", checkJSON(self, tern.ID, tb.ID, self, x1), 422)
	add("a two-check cycle in one batch", "POST", "/api/v1/checks/batch",
		`{"checks":[`+checkJSON(a, tern.ID, tb.ID, b, x1)+`,`+checkJSON(b, tern.ID, tb.ID, a, x1)+`]}`, 422)
	add("a correction of a check that does not exist", "POST", "/api/v1/checks", checkJSON("", tern.ID, tb.ID, uuid.NewString(), x1), 422)
	add("a second correction of a corrected check", "POST", "/api/v1/checks", checkJSON("", tern.ID, tb.ID, corrected.ID, x1), 409)
	add("two corrections of one check in one batch", "POST", "/api/v1/checks/batch",
		`{"checks":[`+checkJSON("", tern.ID, tb.ID, ternCheck.ID, x1)+`,`+checkJSON("", tern.ID, tb.ID, ternCheck.ID, x1)+`]}`, 422)
	// NUL bytes and other control characters in free text.
	add("NUL in a service-event note", "POST", fmt.Sprintf("/api/v1/machines/%d/service-events", tern.ID), `{"note":"X2 jaw\u0000 recalibrated"}`, 422)
	add("NUL in a token name", "POST", "/api/v1/tokens", `{"name":"console\u0000","role":"therapist"}`, 422)
	add("NUL in an acknowledge comment", "POST", "/api/v1/alerts/1/acknowledge", `{"comment":"seen\u0000"}`, 422)
	add("NUL in a resolve comment", "POST", "/api/v1/alerts/1/resolve", `{"comment":"fixed\u0000"}`, 422)
	add("NUL in a check note", "POST", "/api/v1/checks", strings.Replace(checkJSON("", tern.ID, tb.ID, "", x1), `"kind"`, `"note":"a\u0000b","kind"`, 1), 422)
	add("escape character in an operator", "POST", "/api/v1/checks", strings.Replace(checkJSON("", tern.ID, tb.ID, "", x1), `"kind"`, `"operator":"R\u001b[2J","kind"`, 1), 422)
	// Baselines.
	for _, v := range []string{"250", "-5"} {
		add("penumbra baseline "+v+" mm", "POST", fmt.Sprintf("/api/v1/series/%d/baselines", penumbra),
			`{"value_mm":`+v+`,"valid_from":"2026-01-01T00:00:00Z","reason":"commissioning"}`, 422)
	}
	for _, vf := range []string{"0001-01-01T00:00:00Z", "9999-12-31T00:00:00Z"} {
		add("baseline valid_from "+vf, "POST", fmt.Sprintf("/api/v1/series/%d/baselines", position),
			`{"value_mm":50,"valid_from":"`+vf+`","reason":"commissioning"}`, 422)
	}
	// Dates.
	add("service event in year 1", "POST", fmt.Sprintf("/api/v1/machines/%d/service-events", tern.ID), `{"at":"0001-01-01T00:00:00Z","note":"jaw"}`, 422)
	// MLC leaves and layouts.
	add("leaf pair 61 on a 60-pair MLC", "POST", "/api/v1/checks", checkJSON("", tern.ID, tb.ID, "", `[{"edge":"B1P61","position_mm":20}]`), 422)
	add("a leaf on a machine without MLC", "POST", "/api/v1/checks", checkJSON("", plover.ID, pb.ID, "", `[{"edge":"B2P10","position_mm":20}]`), 422)
	add(`mlc_layout "banana"`, "POST", "/api/v1/machines", `{"name":"Linac Banana","mlc_leaf_pairs":60,"mlc_layout":"banana"}`, 422)
	add("layout of 80 pairs on a 60-pair MLC", "POST", "/api/v1/machines", `{"name":"Linac Eighty","mlc_leaf_pairs":60,"mlc_layout":"80x5"}`, 422)
	// Machine names and energies.
	add("TERN beside Tern", "POST", "/api/v1/machines", `{"name":"TERN"}`, 409)
	add("Tern with a zero-width space", "POST", "/api/v1/machines", `{"name":"Tern\u200b"}`, 422)
	add("full-width Tern", "POST", "/api/v1/machines", `{"name":"\uff34\uff45\uff52\uff4e"}`, 409)
	add("6.0000000001 MV beside 6 MV", "POST", fmt.Sprintf("/api/v1/machines/%d/beams", tern.ID), `{"energy_mv":6.0000000001}`, 422)
	// Malformed ids.
	for _, p := range []string{"/api/v1/checks/not-a-uuid/raw", "/api/v1/checks/not-a-uuid"} {
		add("GET "+p, "GET", p, "", 404)
	}
	add("recompute not-a-uuid", "POST", "/api/v1/checks/not-a-uuid/recompute", "", 404)
	add("raw of an unknown check", "GET", "/api/v1/checks/"+uuid.NewString()+"/raw", "", 404)
	// Trailing data after the check part of checks/raw.
	var mp bytes.Buffer
	w := multipart.NewWriter(&mp)
	_ = w.WriteField("check", fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":"2026-03-02T07:45:00Z"} trailing junk`, tern.ID, tb.ID))
	_ = w.WriteField("kind", "profile")
	fw, _ := w.CreateFormFile("file", "p.csv")
	for i := -100; i <= 100; i++ {
		v := 100.0
		if i < -50 || i > 50 {
			v = 2
		}
		fmt.Fprintf(fw, "%d,%g\n", i, v)
	}
	w.Close()
	cs = append(cs, probeCase{name: "trailing junk after the check part", method: "POST", path: "/api/v1/checks/raw", ctype: w.FormDataContentType(), body: mp.Bytes(), want: 400})

	tables := []string{"machines", "beams", "checks", "series", "baselines", "tokens", "service_events", "raw_data", "audit_log"}
	before := map[string]int{}
	for _, tb := range tables {
		before[tb] = e.count(tb)
	}
	fiveXX := 0
	for _, c := range cs {
		req, _ := http.NewRequest(c.method, srv.URL+c.path, bytes.NewReader(c.body))
		if len(c.body) > 0 {
			req.Header.Set("Content-Type", c.ctype)
		}
		req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleAdmin])
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		body, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode >= 500 {
			fiveXX++
		}
		if resp.StatusCode != c.want {
			t.Errorf("%s: %d, want %d: %.300s", c.name, resp.StatusCode, c.want, body)
			continue
		}
		var p struct {
			Detail string                `json:"detail"`
			Errors []halfmark.FieldError `json:"errors"`
		}
		if json.Unmarshal(body, &p) != nil || p.Detail == "" || (c.want == 422 && (len(p.Errors) == 0 || p.Errors[0].Field == "")) {
			t.Errorf("%s: the problem does not name the field: %.300s", c.name, body)
		}
	}
	unwanted := 0
	for _, tb := range tables {
		if n := e.count(tb); n != before[tb] {
			unwanted += n - before[tb]
			t.Errorf("table %s: %d rows before the probe cases, %d after", tb, before[tb], n)
		}
	}
	t.Logf("%d probe cases: %d answered 5xx, %d unwanted rows", len(cs), fiveXX, unwanted)

	// The corrected check stays in its series, marked.
	var pts struct {
		Points []halfmark.Point `json:"points"`
	}
	e.mustDo("GET", fmt.Sprintf("/api/v1/series/%d/points", position), halfmark.RoleTherapist, "", 200, &pts)
	marked := 0
	for _, p := range pts.Points {
		if p.CheckID == corrected.ID && p.Corrected && p.SupersededBy == correction.ID {
			marked++
		}
	}
	if marked != 1 || len(pts.Points) != 3 {
		t.Errorf("Tern's series: %+v; want 3 points with the corrected one marked", pts.Points)
	}
	_ = ctx
}

// A body over the server-wide limit is 413 whether or not it declares its
// length (a chunked body is cut off at the limit), before authentication.
func TestBodyOverLimitIs413(t *testing.T) {
	e := newEnv(t)
	for _, chunked := range []bool{false, true} {
		var body io.Reader = strings.NewReader(`{"note":"` + strings.Repeat("a", 2<<20) + `"}`)
		if chunked {
			body = io.MultiReader(body) // hides the length: sent chunked
		}
		req, _ := http.NewRequest("POST", e.srv.URL+"/api/v1/checks", body)
		req.Header.Set("Content-Type", "application/json")
		req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleTherapist])
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusRequestEntityTooLarge {
			t.Errorf("2 MiB JSON (chunked %v): %d; want 413", chunked, resp.StatusCode)
		}
	}
}
