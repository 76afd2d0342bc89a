package api_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"strings"
	"testing"

	"halfmark"
	"halfmark/analysis/epid/synth"
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
