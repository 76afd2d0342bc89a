package web_test

import (
	"fmt"
	"strconv"
	"strings"
	"testing"

	"github.com/chromedp/chromedp"
	"github.com/chromedp/chromedp/kb"

	"halfmark"
	"halfmark/web"
)

// In Chromium: a notification's finding link opens the finding after
// sign-in; a morning check typed in cm asks for confirmation before
// saving; the engine's Level 3 verdict shows large with the instruction;
// and the wrong check is corrected from the verdict with a reason.
func TestBrowserEntryAndFindings(t *testing.T) {
	ctx := browser(t)
	ff := &fakeFindings{}
	evals := &fakeEvals{m: map[int64]halfmark.SeriesEvaluation{}}
	h := newHarness(t, harnessOpts{findings: ff, evals: evals})
	mid, bids := h.machine("Heron", 6)
	h.history(mid, bids[0], 5, func(int) float64 { return 0 })
	ids := h.jawSeries(bids[0])
	ff.fs = append(ff.fs, bankFinding(mid, ids["X1"]))
	dir := t.TempDir()
	base := h.srv.URL

	// The link of a finding notification, opened without a session.
	step(t, ctx, "open the finding link",
		chromedp.Navigate(base+"/findings/41"),
		chromedp.WaitVisible(chromedp.ID("email")),
		chromedp.SendKeys(chromedp.ID("email"), "physicist@example.org"),
		chromedp.SendKeys(chromedp.ID("password"), testPassword+kb.Enter),
		chromedp.WaitVisible(chromedp.ID("finding-title")))
	shot(t, ctx, dir, "11-finding.png")
	loc := get(t, ctx, "location", chromedp.Evaluate[string](`location.pathname`))
	must(t, loc == "/findings/41", "after sign-in the browser is at %q, want /findings/41", loc)
	title := get(t, ctx, "finding title", chromedp.Text(chromedp.ID("finding-title")))
	must(t, strings.Contains(title, "MLC bank 2") && strings.Contains(title, "Heron"), "finding title %q", title)

	// A check typed in cm: the entry asks before saving.
	before := h.nChecks()
	step(t, ctx, "open entry", chromedp.Navigate(fmt.Sprintf("%s/entry?machine=%d", base, mid)), chromedp.WaitVisible(chromedp.ID("x1")))
	checkID := get(t, ctx, "check id", chromedp.Evaluate[string](`document.querySelector("input[name=check_id]").value`))
	// What the engine stores for 5 mm against a 50 mm baseline: −45 mm, Level 3.
	dev := -45.0
	evals.mu.Lock()
	for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
		evals.m[ids[e]] = halfmark.SeriesEvaluation{Level: halfmark.LevelImmediate, Verdict: halfmark.VerdictSignal, DeviationMM: &dev,
			Rule: "beyond action limit (|-45.00| > 3.00 mm)", Limits: &halfmark.Limits{ToleranceMM: 2, ActionMM: 3},
			Chart: halfmark.SeriesChart{Points: []halfmark.ChartPoint{{CheckID: checkID}}}}
	}
	evals.mu.Unlock()
	step(t, ctx, "type a check in cm",
		chromedp.KeyEvent("5.0"+kb.Tab+"5.0"+kb.Tab+"5.0"+kb.Tab+"5.0"+kb.Enter),
		chromedp.WaitVisible(chromedp.ID("plausibility")))
	shot(t, ctx, dir, "12-entry-cm-prompt.png")
	prompt := get(t, ctx, "prompt", chromedp.Text(chromedp.ID("plausibility")))
	must(t, strings.Contains(prompt, "looks typed in cm") && strings.Contains(prompt, "45 mm from the nominal half-field"), "prompt:\n%s", prompt)
	must(t, h.nChecks() == before, "saved before confirmation")
	active := get(t, ctx, "active element", chromedp.Evaluate[string](`document.activeElement.id`))
	must(t, active == "confirm", "the cursor is in %q; want the confirm button", active)

	// Saved as typed: the engine's Level 3, large, with the instruction.
	step(t, ctx, "save as typed", chromedp.Click(chromedp.ID("confirm")), chromedp.WaitVisible(chromedp.ID("verdict-alarm")))
	shot(t, ctx, dir, "13-entry-level3.png")
	must(t, h.nChecks() == before+1, "not saved after confirmation")
	alarm := get(t, ctx, "alarm", chromedp.Text(chromedp.ID("verdict-alarm")))
	must(t, strings.Contains(alarm, "Level 3") && strings.Contains(alarm, web.DefaultInstruction), "alarm:\n%s", alarm)
	big := get(t, ctx, "font size", chromedp.Evaluate[string](`getComputedStyle(document.querySelector("#verdict-alarm .verdict-level")).fontSize`))
	body := get(t, ctx, "body font", chromedp.Evaluate[string](`getComputedStyle(document.body).fontSize`))
	bs, _ := strconv.ParseFloat(strings.TrimSuffix(big, "px"), 64)
	ns, _ := strconv.ParseFloat(strings.TrimSuffix(body, "px"), 64)
	must(t, bs >= 1.8*ns, "the Level 3 verdict is %s, the page text %s: not large", big, body)
	table := get(t, ctx, "verdict", chromedp.Text(chromedp.CSS("section.verdict table")))
	must(t, strings.Contains(table, "−45.00 > 3.00 mm") && !strings.Contains(table, "|"), "verdict table:\n%s", table)

	// Correct it from the verdict: prefilled, reason required, saved.
	step(t, ctx, "open the correction", chromedp.Click(chromedp.ID("correct-link")), chromedp.WaitVisible(chromedp.ID("reason")))
	x1 := get(t, ctx, "x1", chromedp.Value(chromedp.ID("x1")))
	must(t, x1 == "5", "the correction form shows X1 %q, want the stored 5", x1)
	step(t, ctx, "type the correction",
		chromedp.SetValue(chromedp.ID("x1"), "50.0"), chromedp.SetValue(chromedp.ID("x2"), "50.1"),
		chromedp.SetValue(chromedp.ID("y1"), "49.9"), chromedp.SetValue(chromedp.ID("y2"), "50.0"),
		chromedp.SendKeys(chromedp.ID("reason"), "typed in cm"),
		chromedp.Click(chromedp.ID("save")),
		chromedp.WaitVisible(chromedp.CSS("section.verdict")))
	shot(t, ctx, dir, "14-entry-corrected.png")
	head := get(t, ctx, "verdict head", chromedp.Text(chromedp.CSS("section.verdict h2")))
	must(t, strings.Contains(head, "corrects check "+checkID), "verdict head %q", head)
	must(t, h.superseding(checkID) == 1, "no check supersedes %s", checkID)
	must(t, h.correctionAudited(checkID, "typed in cm"), "correction not audited with its reason")
}
