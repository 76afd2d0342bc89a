package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

func writeSeries(t *testing.T, text string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "series.txt")
	if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// Montgomery, Introduction to Statistical Quality Control, Example 9.1
// (data seen in two copies): μ0 = 10, σ = 1, k = 0.5, h = 5; the
// tabular CUSUM first signals at sample 29 with C+ = 5.28 (secondary).
const montgomery91 = "9.45 7.99 9.29 11.66 12.16 10.18 8.04 11.46 9.20 10.34 9.03 11.47 10.51 9.40 10.08 " +
	"9.37 10.62 10.31 8.52 10.84 10.90 9.33 12.29 11.50 10.60 11.08 10.38 11.62 11.31 10.52"

func TestSPCCommandCUSUM(t *testing.T) {
	p := writeSeries(t, strings.ReplaceAll(montgomery91, " ", "\n")+"\n")
	code, out, errs := runCLI(t, "", "spc", "--method", "cusum", "--target", "10", "--sigma", "1", "--json", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var doc struct {
		FirstSignal *int     `json:"first_signal"`
		UCL         *float64 `json:"ucl"`
		Points      []struct {
			Index  int     `json:"index"`
			CPlus  float64 `json:"cplus"`
			Signal bool    `json:"signal"`
		} `json:"points"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatalf("%v: %s", err, out)
	}
	if doc.FirstSignal == nil || *doc.FirstSignal != 29 || len(doc.Points) != 30 || !doc.Points[28].Signal {
		t.Fatalf("first signal %v, %d points", doc.FirstSignal, len(doc.Points))
	}
	if math.Abs(doc.Points[28].CPlus-5.28) > 0.006 || doc.UCL == nil || *doc.UCL != 5 {
		t.Errorf("C+ at 29 = %v (want 5.28), H = %v (want 5)", doc.Points[28].CPlus, doc.UCL)
	}
	code, out, _ = runCLI(t, "", "spc", "--method", "cusum", "--target", "10", "--sigma", "1", p)
	if code != 0 || !strings.Contains(out, "first signal at point 29") || !strings.Contains(out, "C+") {
		t.Errorf("plain output (exit %d):\n%s", code, out)
	}
}

// NIST/SEMATECH e-Handbook of Statistical Methods §6.3.2.2 (secondary copy): UCL 55.8041,
// LCL 45.8159, centre 50.81, in control.
func TestSPCCommandIMR(t *testing.T) {
	p := writeSeries(t, "49.6\n47.6\n49.9\n51.3\n47.8\n51.2\n52.6\n52.4\n53.6\n52.1\n")
	code, out, errs := runCLI(t, "", "spc", "--method", "imr", "--json", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var doc struct {
		FirstSignal      *int
		UCL, LCL, Centre float64
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	if doc.FirstSignal != nil || math.Abs(doc.UCL-55.8041) > 1e-4 || math.Abs(doc.LCL-45.8159) > 1e-4 || math.Abs(doc.Centre-50.81) > 1e-9 {
		t.Errorf("%+v", doc)
	}
}

// A line rising 0.05 per day reaches target + 2 on day 40 (derived).
func TestSPCCommandTrend(t *testing.T) {
	var b strings.Builder
	for d := 0; d < 16; d++ {
		b.WriteString("2026-03-" + pad(d+1) + "," + strings.TrimRight(strings.TrimRight(strconvF(0.05*float64(d)), "0"), ".") + "\n")
	}
	p := writeSeries(t, b.String())
	code, out, errs := runCLI(t, "", "spc", "--method", "trend", "--target", "0", "--tolerance", "2", p)
	if code != 0 || !strings.Contains(out, "projected to reach the upper limit 2.0000 in 25.0 days (2026-04-10)") {
		t.Errorf("exit %d %s:\n%s", code, errs, out)
	}
}

func TestSPCCommandErrors(t *testing.T) {
	p := writeSeries(t, "1\n2\nthree\n")
	if code, _, errs := runCLI(t, "", "spc", p); code != 1 || !strings.Contains(errs, "line 3") {
		t.Errorf("bad line: exit %d: %s", code, errs)
	}
	if code, _, _ := runCLI(t, "", "spc", "--limits", "wide", p); code != 2 {
		t.Errorf("bad --limits: exit %d, want 2", code)
	}
	if code, _, _ := runCLI(t, "", "spc"); code != 2 {
		t.Errorf("no file: exit %d, want 2", code)
	}
}

func pad(d int) string {
	if d < 10 {
		return "0" + strconvI(d)
	}
	return strconvI(d)
}

func strconvI(v int) string     { return strconv.Itoa(v) }
func strconvF(v float64) string { return strconv.FormatFloat(v, 'f', 4, 64) }
