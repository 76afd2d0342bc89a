package web_test

import (
	"context"
	"encoding/base64"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
	"github.com/chromedp/chromedp/kb"

	"halfmark"
)

const chromiumPath = "/usr/bin/chromium"

// shotsDir is where screenshots are copied for people to look at.
const shotsDir = "/tmp/halfmark-shots"

// browser starts headless Chromium. Without it the test skips, except in
// CI (the CI variable set), where it must run.
func browser(t *testing.T) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("CI") == "" {
			t.Skipf("browser test skipped: %s is not installed (apt-get install -y chromium); in CI (CI set) it runs", chromiumPath)
		}
		t.Fatalf("CI is set but %s is missing: install Debian's chromium package", chromiumPath)
	}
	opts := append(chromedp.DefaultExecAllocatorOptions[:],
		chromedp.ExecPath(chromiumPath), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU,
		chromedp.Flag("disable-component-update", true), chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("no-first-run", true),
		chromedp.Flag("disable-sync", true), chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1280, 900))
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelB := chromedp.NewContext(actx)
	t.Cleanup(func() { cancelB(); cancelA() })
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("start chromium: %v", err)
	}
	return ctx
}

// step runs actions with a timeout (the browser's own context has none).
func step(t *testing.T, ctx context.Context, what string, actions ...chromedp.Action[chromedp.Void]) {
	t.Helper()
	c, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	if err := chromedp.Do(c, actions...); err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

func get[T any](t *testing.T, ctx context.Context, what string, a chromedp.Action[T]) T {
	t.Helper()
	c, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	v, err := chromedp.Run(c, a)
	if err != nil {
		t.Fatalf("%s: %v", what, err)
	}
	return v
}

// shot saves a full-page screenshot under dir and copies it to shotsDir.
func shot(t *testing.T, ctx context.Context, dir, name string) {
	t.Helper()
	png := get(t, ctx, "screenshot "+name, chromedp.FullScreenshot(100))
	if err := os.WriteFile(filepath.Join(dir, name), png, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(shotsDir, 0o755); err == nil {
		_ = os.WriteFile(filepath.Join(shotsDir, name), png, 0o644)
	}
}

func TestBrowser(t *testing.T) {
	ctx := browser(t)
	h := newHarness(t, harnessOpts{engine: true})
	steady, sb := h.machine("Linac Steady", 6, 10)
	drift, db := h.machine("Linac Drift", 6)
	h.history(steady, sb[0], 30, func(int) float64 { return 0 })
	h.history(steady, sb[1], 30, func(int) float64 { return 0 })
	// X2 creeps 0.25 mm a day over the last 10 days, after 20 steady ones
	// that set its baseline: 2.5 mm off at the end, beyond a 2 mm tolerance.
	h.history(drift, db[0], 30, func(i int) float64 { return 0.25 * float64(max(0, i-19)) })
	h.evaluate() // the drift engine's evaluation, as its scheduled job runs it
	sid := h.seriesID(db[0], "X2", halfmark.QPosition)
	dir := t.TempDir()
	base := h.srv.URL

	// Sign in with the keyboard.
	step(t, ctx, "sign in",
		chromedp.Navigate(base+"/"),
		chromedp.WaitVisible(chromedp.ID("email")),
		chromedp.SendKeys(chromedp.ID("email"), "physicist@example.org"),
		chromedp.SendKeys(chromedp.ID("password"), testPassword+kb.Enter),
		chromedp.WaitVisible(chromedp.CSS("table.status")))
	shot(t, ctx, dir, "01-front.png")
	rows := get(t, ctx, "front rows", chromedp.Text(chromedp.CSS("table.status tbody")))
	i, j := strings.Index(rows, "Linac Drift"), strings.Index(rows, "Linac Steady")
	must(t, i >= 0 && j > i, "the drifting machine is not above the steady one:\n%s", rows)
	must(t, strings.Contains(rows, "Level"), "no level text on the front page:\n%s", rows)

	// Morning check with the keyboard only: the cursor starts in X1, Tab moves on, Enter saves.
	before := len(h.checks(""))
	step(t, ctx, "open entry", chromedp.Navigate(fmt.Sprintf("%s/entry?machine=%d", base, steady)), chromedp.WaitVisible(chromedp.ID("x1")))
	active := get(t, ctx, "active element", chromedp.Evaluate[string](`document.activeElement.id`))
	must(t, active == "x1", "the cursor starts in %q; want x1", active)
	step(t, ctx, "type the check",
		chromedp.KeyEvent("50.1"+kb.Tab+"49.9"+kb.Tab+"50.0"+kb.Tab+"50.2"+kb.Enter),
		chromedp.WaitVisible(chromedp.CSS("section.verdict")))
	shot(t, ctx, dir, "02-entry-verdict.png")
	verdict := get(t, ctx, "verdict", chromedp.Text(chromedp.CSS("section.verdict")))
	// The verdict is the engine's stored evaluation of this check: its
	// words for a steady series, or "evaluation pending" until the write
	// path evaluates the touched series before answering.
	must(t, strings.Contains(verdict, "Saved") && strings.Contains(verdict, "X1") && strings.Contains(verdict, "50.10") &&
		strings.Contains(verdict, "Y2") && (strings.Contains(verdict, "in control") || strings.Contains(verdict, "within tolerance") ||
		strings.Contains(verdict, "evaluation pending")) && !strings.Contains(verdict, "Level"), "verdict:\n%s", verdict)
	must(t, len(h.checks("")) == before+1, "the check was not stored")

	// A bad value: the message shows beside the field and nothing is saved.
	before++
	active = get(t, ctx, "active element", chromedp.Evaluate[string](`document.activeElement.id`))
	must(t, active == "x1", "after saving the cursor is in %q; want x1 for the next check", active)
	step(t, ctx, "type a bad check",
		chromedp.KeyEvent("5O.1"+kb.Tab+kb.Tab+"50"+kb.Tab+"50"+kb.Enter),
		chromedp.WaitVisible(chromedp.ID("not-saved")))
	shot(t, ctx, dir, "03-entry-error.png")
	e1 := get(t, ctx, "x1 message", chromedp.Text(chromedp.ID("err-x1")))
	e2 := get(t, ctx, "x2 message", chromedp.Text(chromedp.ID("err-x2")))
	must(t, strings.Contains(e1, "is not a number") && strings.Contains(e2, "X2 is required"), "messages: %q, %q", e1, e2)
	must(t, len(h.checks("")) == before, "a check was saved although X1 was wrong")

	// The entry page at tablet width.
	step(t, ctx, "tablet", chromedp.EmulateViewport(768, 1024), chromedp.Navigate(base+"/entry"), chromedp.WaitVisible(chromedp.ID("x1")))
	shot(t, ctx, dir, "04-entry-tablet.png")
	step(t, ctx, "desktop", chromedp.EmulateViewport(1280, 900))

	step(t, ctx, "machine page", chromedp.Navigate(fmt.Sprintf("%s/machines/%d", base, drift)), chromedp.WaitVisible(chromedp.CSS("svg.chart")))
	shot(t, ctx, dir, "05-machine.png")
	step(t, ctx, "series page", chromedp.Navigate(fmt.Sprintf("%s/series/%d", base, sid)), chromedp.WaitVisible(chromedp.CSS("svg.chart")))
	shot(t, ctx, dir, "06-series.png")
	// The chart's presentation attributes survive the CSP: the tolerance band is filled, not black.
	fill := get(t, ctx, "band fill", chromedp.Evaluate[string](`getComputedStyle(document.querySelector("svg.chart path[fill-opacity], svg.chart path[fill]:not([fill='none'])")).fill`))
	must(t, fill != "" && fill != "rgb(0, 0, 0)", "chart fill %q: styles were dropped", fill)

	// Monthly: upload a profile, see the plot, save.
	csv := filepath.Join(t.TempDir(), "profile-6MV-X.csv")
	if err := os.WriteFile(csv, syntheticProfile(), 0o644); err != nil {
		t.Fatal(err)
	}
	month := time.Now().Format("2006-01")
	step(t, ctx, "upload",
		chromedp.Navigate(fmt.Sprintf("%s/monthly?machine=%d&month=%s", base, steady, month)),
		chromedp.WaitVisible(chromedp.ID("file")),
		chromedp.SetUploadFiles(chromedp.ID("file"), []string{csv}),
		chromedp.Click(chromedp.ID("analyze")),
		chromedp.WaitVisible(chromedp.ID("preview")))
	shot(t, ctx, dir, "07-monthly-preview.png")
	edges := get(t, ctx, "edge table", chromedp.Text(chromedp.ID("edges")))
	must(t, strings.Contains(edges, "50.00") && strings.Contains(edges, "6.00"), "edge table:\n%s", edges)
	n := get(t, ctx, "plot", chromedp.Evaluate[int](`document.querySelectorAll("#preview svg.chart").length`))
	must(t, n == 1, "no profile plot in the preview")
	step(t, ctx, "save", chromedp.Click(chromedp.ID("save")), chromedp.WaitVisible(chromedp.CSS("p.ok-text")))
	shot(t, ctx, dir, "08-monthly-saved.png")
	must(t, len(h.raw()) == 1, "raw data not saved")

	// The monthly PDF, fetched as the browser would download it.
	b64 := get(t, ctx, "pdf", chromedp.Evaluate[string](fmt.Sprintf(`fetch("/machines/%d/report?month=%s").then(r => r.arrayBuffer()).then(b => {
		let s = ""; const u = new Uint8Array(b); for (let i = 0; i < u.length; i++) s += String.fromCharCode(u[i]); return btoa(s); })`, steady, month),
		chromedp.EvalAwaitPromise))
	pdf, err := base64.StdEncoding.DecodeString(b64)
	must(t, err == nil, "%v", err)
	must(t, strings.HasPrefix(string(pdf), "%PDF-"), "the report is not a PDF")
	must(t, strings.Contains(string(pdf), "Linac Steady"), "the PDF does not name the machine")
	_ = os.WriteFile(filepath.Join(dir, "report.pdf"), pdf, 0o644)
	_ = os.WriteFile(filepath.Join(shotsDir, "report.pdf"), pdf, 0o644)
}
