package web_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/epid/synth"
	"halfmark/analysis/rawdata"
)

// saveUpload analyses a file on the monthly page and saves it; it returns
// the stored check's id and the page the save redirects to.
func saveUpload(t *testing.T, c *client, fields map[string]string, name string, content []byte) (string, string) {
	t.Helper()
	fields["_csrf"] = c.csrf("/monthly?machine=" + fields["machine"])
	code, body := c.upload("/monthly/analyze", fields, name, content)
	must(t, code == http.StatusOK, "analyze %s: %d %s", name, code, body)
	form := url.Values{}
	for _, m := range hidden.FindAllStringSubmatch(body[strings.Index(body, `action="/monthly/save"`):], -1) {
		form.Set(m[1], m[2])
	}
	code, _, hdr := c.post("/monthly/save", form)
	must(t, code == http.StatusSeeOther, "save %s: %d", name, code)
	loc, err := url.Parse(hdr.Get("Location"))
	must(t, err == nil && loc.Query().Get("saved") != "", "save %s: no saved id in %q", name, hdr.Get("Location"))
	return loc.Query().Get("saved"), loc.String()
}

// Checks uploaded from the dashboard carry analysis/rawdata's options and
// version, so the API's recompute reads them back and finds the same edges.
// The profile is the piecewise-linear field of syntheticProfile (50 % points
// at ±50 mm); the image has error-function edges at X1 = 40, X2 = 60,
// Y1 = Y2 = 50 mm (analysis/epid/synth): analytic checks.
func TestDashboardUploadsRecompute(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, bids := h.machine("Linac R", 6)
	c := h.signIn("therapist@example.org")
	month := time.Now().Format("2006-01")
	base := map[string]string{"machine": fmt.Sprint(mid), "beam": fmt.Sprint(bids[0]), "kind": "monthly",
		"field_x": "10", "field_y": "10", "month": month, "device": "water tank", "ssd": "90", "depth": "10"}
	fields := func(extra map[string]string) map[string]string {
		m := map[string]string{}
		for k, v := range base {
			m[k] = v
		}
		for k, v := range extra {
			m[k] = v
		}
		return m
	}
	profileID, page := saveUpload(t, c, fields(map[string]string{"type": "profile", "axis": "X"}), "x.csv", syntheticProfile())

	// After saving: a verdict line per edge, from the store; no evaluation
	// has run, so each says so.
	_, body, _ := c.get(page)
	must(t, strings.Contains(body, `id="verdicts"`), "no verdict section after saving")
	must(t, strings.Count(body, "evaluation pending") >= 4, "want 'evaluation pending' for X1, X2 position and penumbra:\n%s", body)
	// The setup stays filled for the next profile, which is offered along Y
	// (the axis still missing); the month is not done with X alone.
	for _, s := range []string{`name="ssd" size="5" value="90"`, `name="depth" size="5" value="10"`, `name="device" value="water tank"`,
		`<option value="Y" selected>`, "missing: Y profile", "profile x.csv"} {
		must(t, strings.Contains(body, s), "page after saving lacks %q\n%s", s, body)
	}
	h.evaluate()
	_, body, _ = c.get(page)
	must(t, !strings.Contains(body, "evaluation pending") && strings.Contains(body, "Level 0 — no signal"),
		"after the evaluation the stored level is not shown:\n%s", body)

	img, err := synth.RTImage{Imager: synth.Default, Frames: [][]float64{
		synth.Field{X1: 40, X2: 60, Y1: 50, Y2: 50, Sigma: 2, Bg: 500, Amp: 30000}.Pixels(synth.Default, float64(synth.Default.Rows-1)/2, float64(synth.Default.Cols-1)/2)}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	delete(base, "ssd")
	delete(base, "depth")
	imageID, page := saveUpload(t, c, fields(map[string]string{"type": "image"}), "field.dcm", img)
	_, body, _ = c.get(page)
	must(t, strings.Contains(body, "✓ done") && strings.Contains(body, "image field.dcm"), "the image (X and Y) does not complete the month")

	_, secret, err := h.db.CreateToken(h.ctx, halfmark.CLIActor("test"), "recompute", halfmark.RolePhysicist)
	if err != nil {
		t.Fatal(err)
	}
	for _, id := range []string{profileID, imageID} {
		raw, err := h.db.RawForCheck(h.ctx, id)
		must(t, err == nil && len(raw) == 1 && raw[0].AnalysisVersion == rawdata.Version, "check %s: raw %v %v", id, raw, err)
		req, _ := http.NewRequest(http.MethodPost, h.srv.URL+"/api/v1/checks/"+id+"/recompute", nil)
		req.Header.Set("Authorization", "Bearer "+secret)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		var out map[string]any
		_ = json.NewDecoder(resp.Body).Decode(&out)
		resp.Body.Close()
		must(t, resp.StatusCode == http.StatusOK && out["changed"] == false,
			"recompute of dashboard check %s: %d %v (want 200, unchanged)", id, resp.StatusCode, out)
	}
}
