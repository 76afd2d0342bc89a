package main

import (
	"encoding/json"
	"flag"
	"math"
	"net/http"
	"net/http/httptest"
	"reflect"
	"strings"
	"testing"

	"halfmark/analysis/epid"
	"halfmark/analysis/epid/synth"
	"halfmark/db/dbtest"
)

// Flags may come before, between or after the arguments; "--" ends them.
func TestParseAnywhere(t *testing.T) {
	for _, c := range []struct {
		args []string
		pos  []string
		json bool
		axis string
	}{
		{[]string{"FILE", "--json", "--axis", "Y"}, []string{"FILE"}, true, "Y"},
		{[]string{"--axis", "Y", "FILE", "--json"}, []string{"FILE"}, true, "Y"},
		{[]string{"A", "--json", "B"}, []string{"A", "B"}, true, "X"},
		{[]string{"--json", "--", "-x", "--axis"}, []string{"-x", "--axis"}, true, "X"},
		{[]string{"-", "--axis=Y"}, []string{"-"}, false, "Y"},
	} {
		fs := flag.NewFlagSet("t", flag.ContinueOnError)
		j := fs.Bool("json", false, "")
		a := fs.String("axis", "X", "")
		if err := parseAnywhere(fs, c.args); err != nil {
			t.Fatalf("%q: %v", c.args, err)
		}
		if !reflect.DeepEqual(append([]string{}, fs.Args()...), c.pos) || *j != c.json || *a != c.axis {
			t.Errorf("%q: args %q json %v axis %q; want %q %v %q", c.args, fs.Args(), *j, *a, c.pos, c.json, c.axis)
		}
	}
}

// The usage line's own example for each analysis, flags after the file.
// Profile: error-function edges at ±50 mm, so the 50 % points are ±50 mm
// (analytic).
func TestUsageExamplesAnalyze(t *testing.T) {
	p := erfProfile(t, 50, 2, 0.5)
	code, out, stderr := runPlain(t, "analyze", "profile", p, "--axis", "X", "--no-fff", "--normalise", "cax", "--interp", "linear", "--smooth", "0", "--json")
	var r struct {
		Left  float64 `json:"left_edge_mm"`
		Right float64 `json:"right_edge_mm"`
	}
	if code != 0 || json.Unmarshal([]byte(out), &r) != nil || math.Abs(r.Left+50) > 0.05 || math.Abs(r.Right-50) > 0.05 {
		t.Fatalf("analyze profile FILE --… --json: exit %d, %q %s", code, out, stderr)
	}
	// The issue's own words: --fff after the file is accepted as a flag
	// (whatever the analysis then says of a flat profile).
	if code, _, stderr := runPlain(t, "analyze", "profile", p, "--fff", "--json"); code == 2 || strings.Contains(stderr, "give one file") {
		t.Fatalf("analyze profile FILE --fff --json refused its flags: exit %d %s", code, stderr)
	}
	g := synth.Default
	ar, ac := g.Axis()
	img := writeDICOM(t, synth.Field{X1: 50, X2: 50, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 100, Amp: 20000}.Pixels(g, ar, ac))
	code, out, stderr = runPlain(t, "analyze", "image", img, "--json")
	var fr epid.FieldResult
	if code != 0 || json.Unmarshal([]byte(out), &fr) != nil || math.Abs(fr.Y2MM-60) > 0.1 {
		t.Fatalf("analyze image FILE.dcm --json: exit %d %s", code, stderr)
	}
	pk := synth.Picket{LeafWidthsMM: epid.Layout60.WidthsMM, Pickets: []float64{-60, -30, 0, 30, 60}, Width: 3, Sigma: 1,
		YJaw: 95, Bg: 100, Amp: 20000}
	pf := writeDICOM(t, pk.Pixels(synth.Default))
	if code, _, stderr := runPlain(t, "analyze", "picket", pf, "--pickets", "-60,-30,0,30,60", "--layout", "60", "--tolerance", "0.5", "--json"); code != 0 {
		t.Fatalf("analyze picket FILE.dcm --pickets …: exit %d %s", code, stderr)
	}
	if code, _, _ := runPlain(t, "analyze", "profile", p, "--no-such-flag"); code != 2 {
		t.Errorf("an unknown flag after the file: exit %d, want 2", code)
	}
}

// spc --method imr|ewma|cusum|trend FILE, flags after the file and after
// "--". Montgomery's Example 9.1 data signal at sample 29 (see spc_test.go).
func TestUsageExampleSPC(t *testing.T) {
	p := writeSeries(t, strings.ReplaceAll(montgomery91, " ", "\n")+"\n")
	_, before, _ := runCLI(t, "", "spc", "--method", "cusum", "--target", "10", "--sigma", "1", "--json", p)
	code, after, stderr := runCLI(t, "", "spc", p, "--method", "cusum", "--target", "10", "--sigma", "1", "--json")
	if code != 0 || after != before || after == "" {
		t.Fatalf("flags after the file: exit %d, output differs: %s", code, stderr)
	}
	if code, out, _ := runCLI(t, "", "spc", "--method", "cusum", "--target", "10", "--sigma", "1", "--json", "--", p); code != 0 || out != before {
		t.Fatalf("-- before the file: exit %d", code)
	}
}

// The database commands: token create --name N --role R, token revoke ID,
// user add --email E --role R, import checks FILE.csv, migrate.
func TestUsageExamplesDatabase(t *testing.T) {
	url := dbtest.New(t)
	if code, _, stderr := runCLI(t, "", "migrate", "--database-url", url); code != 0 {
		t.Fatalf("migrate --database-url URL: exit %d %s", code, stderr)
	}
	if code, _, stderr := runCLI(t, url, "token", "create", "--name", "console-a", "--role", "therapist"); code != 0 {
		t.Fatalf("token create: exit %d %s", code, stderr)
	}
	if code, _, stderr := runCLI(t, "", "token", "revoke", "1", "--database-url", url); code != 0 {
		t.Fatalf("token revoke ID --database-url URL: exit %d %s", code, stderr)
	}
	if code, _, stderr := runCLIStdin(t, url, "a typed password\n", "user", "add", "--email", "e@example.org", "--role", "physicist", "--password-stdin"); code != 0 {
		t.Fatalf("user add: exit %d %s", code, stderr)
	}
	p := writeCSV(t, 5, nil)
	code, out, stderr := runCLI(t, url, "import", "checks", p, "--create-missing")
	if code != 0 || count(t, url, "SELECT count(*) FROM checks") == 0 {
		t.Fatalf("import checks FILE.csv --create-missing: exit %d\n%s\n%s", code, out, stderr)
	}
}

// probe URL (flags after it) answers 0 for a healthy URL and 1 otherwise.
func TestUsageExampleProbe(t *testing.T) {
	ok := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, _ *http.Request) {}))
	defer ok.Close()
	bad := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, _ *http.Request) { w.WriteHeader(http.StatusServiceUnavailable) }))
	defer bad.Close()
	if code, _, stderr := runPlain(t, "probe", ok.URL); code != 0 {
		t.Fatalf("probe URL: exit %d %s", code, stderr)
	}
	if code, _, _ := runPlain(t, "probe", bad.URL); code != 1 {
		t.Fatalf("probe of a 503: exit %d, want 1", code)
	}
}

// Help shows the real defaults: the demo keeps its data apart.
func TestHelpShowsRealDefaults(t *testing.T) {
	_, out, _ := runPlain(t, "demo", "--help")
	if !strings.Contains(out, `(default "./halfmark-demo-data")`) || strings.Contains(out, `"./halfmark-data"`) {
		t.Errorf("demo --help does not show ./halfmark-demo-data as the default:\n%s", out)
	}
	_, out, _ = runPlain(t, "serve", "--help")
	if !strings.Contains(out, `(default "./halfmark-data")`) {
		t.Errorf("serve --help does not show ./halfmark-data:\n%s", out)
	}
	_, out, _ = runPlain(t, "analyze", "picket", "--help")
	if !strings.Contains(out, `-tolerance float`) || !strings.Contains(out, "(default 0.5)") {
		t.Errorf("analyze picket --help lacks its flags with defaults:\n%s", out)
	}
}
