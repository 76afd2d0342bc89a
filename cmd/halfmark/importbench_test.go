package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"halfmark/db/dbtest"
)

// benchLogs writes the same n checks of four jaw edges (position and
// penumbra each) as a long file (4n rows, today's layout) and as a wide
// file (n rows) with its mapping.
func benchLogs(b *testing.B, n int) (long, wide, mapping string) {
	dir := b.TempDir()
	var l, w strings.Builder
	l.WriteString("machine,beam,kind,measured_at,ssd_cm,depth_cm,field_x_cm,field_y_cm,edge,position_mm,penumbra_mm,operator\n")
	w.WriteString("Date,X1,X2,Y1,Y2,Pen X1,Pen X2,Pen Y1,Pen Y2\n")
	start := time.Date(2010, 1, 1, 7, 30, 0, 0, time.UTC) // one check an hour: 100,000 end in 2021
	for i := 0; i < n; i++ {
		at := start.Add(time.Duration(i) * time.Hour).Format(time.RFC3339)
		pos := 55.0 + float64(i%9)*0.02
		for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
			fmt.Fprintf(&l, "Linac Aster,6 MV,morning,%s,100,10,10,10,%s,%.2f,3.1,R. Quill\n", at, e, pos)
		}
		fmt.Fprintf(&w, "%s,%.2f,%.2f,%.2f,%.2f,3.1,3.1,3.1,3.1\n", at, pos, pos, pos, pos)
	}
	m := `layout = "wide"
[columns]
measured_at = "Date"
X1 = "X1"
X2 = "X2"
Y1 = "Y1"
Y2 = "Y2"
penumbra.X1 = "Pen X1"
penumbra.X2 = "Pen X2"
penumbra.Y1 = "Pen Y1"
penumbra.Y2 = "Pen Y2"
[constants]
machine = "Linac Aster"
beam = "6 MV"
kind = "morning"
ssd_cm = 100
depth_cm = 10
field_x_cm = 10
field_y_cm = 10
operator = "R. Quill"
`
	for name, s := range map[string]string{"long.csv": l.String(), "wide.csv": w.String(), "wide.toml": m} {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(s), 0o644); err != nil {
			b.Fatal(err)
		}
	}
	return filepath.Join(dir, "long.csv"), filepath.Join(dir, "wide.csv"), filepath.Join(dir, "wide.toml")
}

// BenchmarkImportWideVsLong imports the same results — n checks, 4n edge
// results — once from the wide layout through a mapping and once from
// today's long layout, each into its own empty database, and reports the
// time ratio wide/long (target ≤ 2). n is HALFMARK_BENCH_IMPORT_CHECKS
// (default 100,000: 400,000 edge results).
func BenchmarkImportWideVsLong(b *testing.B) {
	n := 100000
	if s := os.Getenv("HALFMARK_BENCH_IMPORT_CHECKS"); s != "" {
		n, _ = strconv.Atoi(s)
	}
	long, wide, mapping := benchLogs(b, n)
	var tLong, tWide time.Duration
	for i := 0; i < b.N; i++ {
		runs := []struct {
			args []string
			t    *time.Duration
		}{
			{[]string{"import", "checks", "--create-missing", long}, &tLong},
			{[]string{"import", "checks", "--create-missing", "--map", mapping, wide}, &tWide},
		}
		if i%2 == 1 {
			runs[0], runs[1] = runs[1], runs[0]
		}
		for _, r := range runs {
			url := dbtest.New(b)
			var out, errb bytes.Buffer
			getenv := func(k string) string {
				if k == "HALFMARK_DATABASE_URL" {
					return url
				}
				return ""
			}
			start := time.Now()
			code := run(context.Background(), append([]string{"halfmark"}, r.args...), getenv, strings.NewReader(""), &out, &errb)
			*r.t += time.Since(start)
			want := fmt.Sprintf("storing: %d/%d checks (100%%)", n, n)
			if code != 0 || !strings.Contains(out.String(), fmt.Sprintf("imported: %d new checks", n)) || !strings.Contains(errb.String(), want) {
				b.Fatalf("%v: exit %d\n%.2000s\n%.2000s", r.args, code, out.String(), errb.String())
			}
		}
	}
	b.ReportMetric(tLong.Seconds()/float64(b.N), "s-long/op")
	b.ReportMetric(tWide.Seconds()/float64(b.N), "s-wide/op")
	b.ReportMetric(tWide.Seconds()/tLong.Seconds(), "wide/long")
}
