package api_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"regexp"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/api"
	"halfmark/db"
	"halfmark/web"
)

// longRule is a rule text longer than any table cell: the report must
// wrap it, never cut it.
const longRule = "bank 2 mean beyond tolerance (|-0.92| > 0.80 mm) after the service of 2026-10-28; " +
	"every leaf end of bank 2 moved the same way in the picket-fence images, so the finding is the bank, not a leaf; " +
	"repeat the picket fence after recalibrating the bank offset and compare with the commissioning baseline"

// reportFindings is a tiny stand-in for the drift engine's finding store:
// one Level 2 finding of bank 2, acknowledged, open through the month.
type reportFindings struct{ f halfmark.Finding }

func (r reportFindings) Findings(_ context.Context, f halfmark.FindingFilter) ([]halfmark.Finding, error) {
	if f.MachineID != r.f.MachineID {
		return nil, nil
	}
	return []halfmark.Finding{r.f}, nil
}
func (r reportFindings) Finding(context.Context, int64) (halfmark.Finding, error) { return r.f, nil }
func (r reportFindings) AcknowledgeFinding(context.Context, halfmark.Actor, int64, string) (halfmark.Finding, error) {
	return r.f, nil
}
func (r reportFindings) ResolveFinding(context.Context, halfmark.Actor, int64, string) (halfmark.Finding, error) {
	return r.f, nil
}

// reportEvals stands in for the engine's stored evaluations: every series
// "within tolerance" around its first value, ±2 mm, with a long rule text.
type reportEvals struct{ d *db.DB }

func (r reportEvals) SeriesEvaluation(ctx context.Context, id int64) (halfmark.SeriesEvaluation, error) {
	pts, err := r.d.Points(ctx, id)
	if err != nil || len(pts) == 0 {
		return halfmark.SeriesEvaluation{}, halfmark.Errorf(halfmark.ENotFound, "series %d not evaluated", id)
	}
	c := pts[0].Value
	lo, hi := c-2, c+2
	ev := halfmark.SeriesEvaluation{SeriesID: id, EvaluatedAt: pts[len(pts)-1].MeasuredAt, Verdict: halfmark.VerdictWithinTolerance,
		Rule: longRule, Limits: &halfmark.Limits{ToleranceMM: 2, ActionMM: 3}, BaselineMM: c,
		Chart: halfmark.SeriesChart{Centre: c, ToleranceLower: &lo, ToleranceUpper: &hi}}
	for _, p := range pts {
		ev.Chart.Points = append(ev.Chart.Points, halfmark.ChartPoint{Time: p.MeasuredAt, ValueMM: p.Value, DeviationMM: p.Value - c, CheckID: p.CheckID})
	}
	return ev, nil
}

type book struct{}

func (book) Limits(halfmark.Quantity, halfmark.CheckKind, string, bool) (halfmark.Limits, bool) {
	return halfmark.Limits{ToleranceMM: 2, ActionMM: 3}, true
}
func (book) Hash() string           { return strings.Repeat("cd", 32) }
func (book) Source() string         { return "shipped example tolerances" }
func (book) IsShippedExample() bool { return true }

// The monthly report through the API: drafts for therapists, signing for
// physicists with a reason when a Level 2 finding is active, and the
// signed bytes served unchanged — their SHA-256 (Go's crypto/sha256,
// FIPS 180-4) equals the answer at signing and the audit row, also after
// new checks arrive. pdftotext (poppler) reads "page n of N" on every page
// and the long rule text whole.
func TestMonthlyReportAPI(t *testing.T) {
	e := newEnv(t)
	ctx := context.Background()
	now := time.Now()
	first := time.Date(now.Year(), now.Month(), 1, 0, 0, 0, 0, time.Local).AddDate(0, -1, 0)
	month := first.Format("2006-01")
	fnd := halfmark.Finding{ID: 7, MachineID: e.mach, Machine: "Linac Aster", Component: halfmark.Component{Kind: halfmark.ComponentMLCBank, Name: "bank 2"},
		Level: halfmark.LevelScheduled, State: halfmark.FindingAcknowledged, MagnitudeMM: -0.92, MagnitudeCIMM: [2]float64{-1.04, -0.80},
		Crossing: halfmark.FindingCrossing{Status: halfmark.CrossingAlreadyBeyond}, Message: longRule,
		OpenedAt: first.AddDate(0, 0, -3), AckBy: "physicist@example.org", AckComment: "service booked"}
	deps := web.Deps{Machines: e.db, Checks: e.db, Series: e.db, Tolerances: book{}, Findings: reportFindings{fnd}, Evaluations: reportEvals{e.db}}
	srv := newHTTPServer(api.New(api.Services{Machines: e.db, Checks: e.db, Series: e.db, Auth: e.db, Audit: e.db, Pinger: e.db,
		Reports: e.db, ReportRenderer: web.NewReporter(deps)}))
	t.Cleanup(srv.Close)
	e.srv = srv

	// Morning checks on every day of the month and one monthly picket fence.
	var cs []halfmark.Check
	ten := 10.0
	for d := first; d.Month() == first.Month(); d = d.AddDate(0, 0, 1) {
		cs = append(cs, halfmark.Check{MachineID: e.mach, BeamID: e.beam, Kind: halfmark.KindMorning, MeasuredAt: d.Add(7 * time.Hour),
			Setup: halfmark.Setup{FieldXcm: &ten, FieldYcm: &ten}, Edges: []halfmark.EdgeResult{
				{Edge: "X1", PositionMM: 50}, {Edge: "X2", PositionMM: 50.1}, {Edge: "Y1", PositionMM: 49.9}, {Edge: "Y2", PositionMM: 50}}})
	}
	var leaves []halfmark.EdgeResult
	for b := 1; b <= 2; b++ {
		for n := 1; n <= 10; n++ {
			leaves = append(leaves, halfmark.EdgeResult{Edge: fmt.Sprintf("B%dP%d", b, n), PositionMM: 20 + 0.01*float64(n)})
		}
	}
	cs = append(cs, halfmark.Check{MachineID: e.mach, BeamID: e.beam, Kind: halfmark.KindMonthly, MeasuredAt: first.AddDate(0, 0, 10).Add(9 * time.Hour),
		Setup: halfmark.Setup{FieldXcm: &ten, FieldYcm: &ten}, Edges: leaves})
	if _, err := e.db.RecordBatch(ctx, halfmark.CLIActor("seed"), cs); err != nil {
		t.Fatal(err)
	}
	base := fmt.Sprintf("/api/v1/machines/%d/reports/%s", e.mach, month)

	st, hd, draft := e.do("GET", base, halfmark.RoleTherapist, "")
	must(t, st == 200 && hd.Get("Content-Type") == "application/pdf" && bytes.HasPrefix(draft, []byte("%PDF-")), "draft: %d %s", st, hd.Get("Content-Type"))
	st, _, _ = e.do("GET", base, "", "")
	must(t, st == 401, "draft without a token: %d", st)
	st, _, b := e.do("GET", fmt.Sprintf("/api/v1/machines/%d/reports/2026-13", e.mach), halfmark.RoleTherapist, "")
	must(t, st == 422 && strings.Contains(string(b), "month"), "bad month: %d %s", st, b)
	st, _, _ = e.do("GET", fmt.Sprintf("/api/v1/machines/%d/reports/%s", e.mach+99, month), halfmark.RoleTherapist, "")
	must(t, st == 404, "unknown machine: %d", st)
	st, _, _ = e.do("GET", base+"/signed", halfmark.RoleTherapist, "")
	must(t, st == 404, "signed before signing: %d", st)

	st, _, _ = e.do("POST", base+"/sign", halfmark.RoleTherapist, `{"reason":"x"}`)
	must(t, st == 403, "therapist signing: %d", st)
	st, _, b = e.do("POST", base+"/sign", halfmark.RolePhysicist, "")
	must(t, st == 422 && strings.Contains(string(b), `"reason"`) && strings.Contains(string(b), "finding #7"), "signing with a Level 2 finding and no reason: %d %s", st, b)
	must(t, e.count("signed_reports") == 0, "a refused signature was stored")

	var ans struct {
		SHA256   string    `json:"sha256"`
		SignedBy string    `json:"signed_by"`
		SignedAt time.Time `json:"signed_at"`
	}
	e.mustDo("POST", base+"/sign", halfmark.RolePhysicist, `{"reason":"bank 2 recalibration booked; finding acknowledged"}`, 201, &ans)
	must(t, ans.SignedBy == "token:t-physicist" && !ans.SignedAt.IsZero() && len(ans.SHA256) == 64, "answer %+v", ans)

	signed := func() []byte {
		st, hd, pdf := e.do("GET", base+"/signed", halfmark.RoleTherapist, "")
		must(t, st == 200 && hd.Get("X-Report-Signed-By") == "token:t-physicist" && hd.Get("X-Report-SHA256") == ans.SHA256, "signed: %d %v", st, hd)
		return pdf
	}
	pdf := signed()
	sum := sha256.Sum256(pdf)
	must(t, hex.EncodeToString(sum[:]) == ans.SHA256, "SHA-256 of the download %x differs from the answer %s", sum, ans.SHA256)
	es, err := e.db.Audit(ctx, "report", halfmark.ReportEntityID(e.mach, month), 5)
	must(t, err == nil && len(es) == 1 && es[0].Detail["sha256"] == ans.SHA256, "audit %+v %v", es, err)

	// A late check of the month arrives: the draft changes, the signed copy does not.
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"monthly","measured_at":%q,
		"setup":{"field_x_cm":10,"field_y_cm":10},"edges":[{"edge":"X1","position_mm":50.3}]}`, e.mach, e.beam,
		first.AddDate(0, 0, 20).Format(time.RFC3339)), 201, nil)
	again := signed()
	sum2 := sha256.Sum256(again)
	must(t, bytes.Equal(again, pdf) && hex.EncodeToString(sum2[:]) == ans.SHA256, "the signed copy changed after a new check")
	st, _, _ = e.do("POST", base+"/sign", halfmark.RolePhysicist, `{"reason":"again"}`)
	must(t, st == 409, "second signature: %d", st)

	_ = os.WriteFile("/tmp/halfmark-report-api.pdf", pdf, 0o644)
	pdfText(t, pdf, month)
}

// pdfText checks the report as pdftotext (poppler-utils) reads it.
func pdfText(t *testing.T, pdf []byte, month string) {
	t.Helper()
	if _, err := exec.LookPath("pdftotext"); err != nil {
		if os.Getenv("CI") == "" {
			t.Skip("pdftotext is not installed (apt-get install poppler-utils); in CI it runs")
		}
		t.Fatal("CI is set but pdftotext is missing: install poppler-utils")
	}
	cmd := exec.Command("pdftotext", "-", "-")
	cmd.Stdin = bytes.NewReader(pdf)
	out, err := cmd.Output()
	if err != nil {
		t.Fatal(err)
	}
	text := string(out)
	pages := strings.Split(strings.TrimRight(text, "\f"), "\f")
	n := len(pages)
	must(t, n >= 3, "report has %d pages; want the summary and chart pages", n)
	for i, p := range pages {
		want := fmt.Sprintf("page %d of %d", i+1, n)
		must(t, strings.Contains(p, want) && strings.Contains(p, "Linac Aster") && strings.Contains(p, month), "page %d lacks %q, the machine or the month:\n%s", i+1, want, p)
	}
	flat := strings.Join(strings.Fields(text), " ")
	plain := strings.Replace(longRule, "|-0.92|", "-0.92", 1)
	must(t, strings.Contains(flat, plain), "the rule text is not whole in the report:\n%s", flat)
	must(t, !strings.Contains(text, "…") && !strings.Contains(text, "|-0.92|"), "cut-off marks or absolute-value bars in the report")
	for _, w := range []string{"bank 2", "Level 2", "acknowledged by physicist@example.org", "SHIPPED EXAMPLE", strings.Repeat("cd", 32),
		"bank 1", "within tolerance"} {
		must(t, strings.Contains(flat, w), "report lacks %q", w)
	}
	must(t, regexp.MustCompile(`bank 1 · .{3,40} · image`).MatchString(flat) && regexp.MustCompile(`bank 2 · .{3,40} · image`).MatchString(flat), "no leaf chart per bank")
	must(t, strings.Contains(flat, "X1 position") && strings.Contains(flat, "Y2 position"), "no jaw panels")
}

func must(t *testing.T, ok bool, format string, args ...any) {
	t.Helper()
	if !ok {
		t.Fatalf(format, args...)
	}
}

var _ = json.Marshal
