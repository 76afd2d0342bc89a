package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/xuri/excelize/v2"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func writeFile(t *testing.T, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// latin1 encodes s as Windows-1252 (Latin-1 letters only).
func latin1(s string) []byte {
	var b []byte
	for _, r := range s {
		b = append(b, byte(r))
	}
	return b
}

const europeanLog = "Gerät;Energie;Datum;X1 (mm);X2 (mm);Y1 (mm);Y2 (mm);Halbschatten X1;Kürzel\r\n" +
	"Tern;6X;04.03.2024 07:41;-50,2;49,8;-50,1;50,3;3,1;RQ\r\n" +
	"Tern;6X;05.03.2024 07:39;-50,0;50,0;-49,9;50,1;3,2;RQ\r\n" +
	"Tern;6FFF;05.03.2024 07:52;-49,8;50,2;-50,0;50,0;;RQ\r\n"

const europeanMap = `layout = "wide"
timezone = "Europe/Berlin"
[columns]
machine = "Gerät"
beam = "Energie"
measured_at = "Datum"
operator = "Kürzel"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
Y1 = "Y1 (mm)"
Y2 = "Y2 (mm)"
penumbra.X1 = "Halbschatten X1"
[constants]
kind = "morning"
field_x_cm = 10
field_y_cm = 10
[beams]
"6X" = "6 MV"
`

const usLog = "Date,Time,Linac,Energy,X1,X2,Y1,Y2,Tech\n" +
	"03/04/2024,7:41 AM,Heron,6X,-50.1,50.2,-49.8,50.0,JD\n" +
	"03/05/2024,7:38 AM,Heron,6X,-50.0,50.1,-49.9,50.1,JD\n" +
	"03/05/2024,7:44 AM,Heron,10X,-50.2,50.0,-50.0,49.9,JD\n"

const usMap = `layout = "wide"
date_format = "MM/DD/YYYY"
timezone = "America/Chicago"
[columns]
date = "Date"
time = "Time"
machine = "Linac"
beam = "Energy"
operator = "Tech"
X1 = "X1"
X2 = "X2"
Y1 = "Y1"
Y2 = "Y2"
[constants]
kind = "morning"
`

const workbookMap = `layout = "wide"
timezone = "UTC"
[columns]
measured_at = "Date"
beam = "Energy"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
penumbra.X1 = "Pen X1"
[constants]
kind = "monthly"
[sheet.Tern]
machine = "Tern"
[sheet.Plover]
machine = "Plover"
`

// workbook writes two sheets with excelize: dates as serial numbers.
func workbook(t *testing.T) []byte {
	f := excelize.NewFile()
	defer f.Close()
	if err := f.SetSheetName("Sheet1", "Tern"); err != nil {
		t.Fatal(err)
	}
	if _, err := f.NewSheet("Plover"); err != nil {
		t.Fatal(err)
	}
	header := []any{"Date", "Energy", "X1 (mm)", "X2 (mm)", "Pen X1"}
	for sheet, rows := range map[string][][]any{
		"Tern":   {{45355.28125, "6X", -50.3, 50.1, 3.2}, {45385.28125, "6 MV", -50.0, 50.0, nil}},
		"Plover": {{45355.3, "6FFF", -49.9, 50.2, 2.9}, {45385.3, "6FFF", -50.1, 49.6, 3.0}, {45416.3, "6FFF", -50.0, 49.9, 3.1}},
	} {
		if err := f.SetSheetRow(sheet, "A1", &header); err != nil {
			t.Fatal(err)
		}
		for i, r := range rows {
			cell, _ := excelize.CoordinatesToCellName(1, i+2)
			if err := f.SetSheetRow(sheet, cell, &r); err != nil {
				t.Fatal(err)
			}
		}
	}
	var b bytes.Buffer
	if err := f.Write(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// The three spreadsheet logs each import with one command and a mapping;
// the values stored are those written; importing again stores nothing.
func TestImportSpreadsheetLogsWithMappings(t *testing.T) {
	url := dbtest.New(t)
	for _, tc := range []struct {
		name, file, mapping string
		data                []byte
		checks, edges       int
	}{
		{"European semicolon, Windows-1252", "log.csv", europeanMap, latin1(europeanLog), 3, 12},
		{"US wide CSV", "log.csv", usMap, []byte(usLog), 3, 12},
		{"two-sheet workbook", "log.xlsx", workbookMap, workbook(t), 5, 10},
	} {
		p := writeFile(t, tc.file, tc.data)
		m := writeFile(t, "map.toml", []byte(tc.mapping))
		code, out, stderr := runCLI(t, url, "import", "checks", "--map", m, "--create-missing", p)
		if code != 0 || !strings.Contains(out, fmt.Sprintf("imported: %d new checks, 0 already stored", tc.checks)) {
			t.Fatalf("%s: exit %d\n%s\n%s", tc.name, code, out, stderr)
		}
		code, out, stderr = runCLI(t, url, "import", "checks", "--map", m, p)
		if code != 0 || !strings.Contains(out, fmt.Sprintf("imported: 0 new checks, %d already stored", tc.checks)) {
			t.Fatalf("%s re-import: exit %d\n%s\n%s", tc.name, code, out, stderr)
		}
	}
	if n := count(t, url, "SELECT count(*) FROM checks"); n != 11 {
		t.Errorf("%d checks stored, want 3 + 3 + 5", n)
	}
	if n := count(t, url, "SELECT sum(jsonb_array_length(edges))::int FROM checks"); n != 34 {
		t.Errorf("%d edge results stored, want 12 + 12 + 10", n)
	}
	// Values as written: Tern 6 MV on 4 March 07:41 CET (06:41 UTC; IANA tz database), X1 −50.2 mm, penumbra 3.1 mm.
	if n := count(t, url, `SELECT count(*) FROM checks c JOIN machines m ON m.id = c.machine_id, jsonb_array_elements(c.edges) e
		WHERE m.name = 'Tern' AND c.measured_at = '2024-03-04T06:41:00Z' AND e->>'edge' = 'X1'
		AND (e->>'position_mm')::float8 = -50.2 AND (e->>'penumbra_mm')::float8 = 3.1`); n != 1 {
		t.Errorf("the European row is not stored as written (%d matches)", n)
	}
	// Heron 6 MV on 4 March 07:41 CST (13:41 UTC), Y1 −49.8 mm.
	if n := count(t, url, `SELECT count(*) FROM checks c JOIN machines m ON m.id = c.machine_id, jsonb_array_elements(c.edges) e
		WHERE m.name = 'Heron' AND c.measured_at = '2024-03-04T13:41:00Z' AND e->>'edge' = 'Y1' AND (e->>'position_mm')::float8 = -49.8`); n != 1 {
		t.Errorf("the US row is not stored as written (%d matches)", n)
	}
	// Plover 6 MV FFF from the workbook: serial 45355.3 = 2024-03-04 07:12 (excelize's conversion).
	want, _ := excelize.ExcelDateToTime(45355.3, false)
	if n := count(t, url, fmt.Sprintf(`SELECT count(*) FROM checks c JOIN machines m ON m.id = c.machine_id JOIN beams b ON b.id = c.beam_id
		WHERE m.name = 'Plover' AND b.fff AND b.energy_mv = 6 AND c.kind = 'monthly' AND c.measured_at = '%s'`, want.Format("2006-01-02T15:04:05Z"))); n != 1 {
		t.Errorf("the workbook row at %v is not stored (%d matches)", want, n)
	}
}

// A dry run with --create-missing stores and creates nothing, lists what
// it would create, previews the checks and refuses no row for the
// machines it would create.
func TestDryRunCreateMissingPreviews(t *testing.T) {
	url := dbtest.New(t)
	p := writeFile(t, "log.csv", []byte(usLog+"03/06/2024,7:40 AM,Heron,6X,-5.01,50.0,-49.9,50.1,JD\n"))
	m := writeFile(t, "map.toml", []byte(usMap+"field_x_cm = 10\n"))
	code, out, stderr := runCLI(t, url, "import", "checks", "--map", m, "--create-missing", "--dry-run", "--skip-bad", p)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, stderr)
	}
	for _, want := range []string{
		"would create: machine Heron (SAD 100 cm)", "would create: beam Heron 6 MV", "would create: beam Heron 10 MV",
		"Heron | 6 MV | morning | 2024-03-04T07:41:00-06:00", "X1 -50.1 mm",
		"Heron | 6 MV | morning: 2 checks, 8 edge results", "Heron | 10 MV | morning: 1 checks, 4 edge results",
		"date range: 2024-03-04T07:41:00-06:00 to 2024-03-05T07:44:00-06:00",
		"bad row: line 5: X1: -5.01 mm looks like cm", "dry run: 3 checks would be stored",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("preview lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "does not exist") {
		t.Errorf("a dry run with --create-missing reports unknown machines as bad:\n%s", out)
	}
	if n := count(t, url, "SELECT (SELECT count(*) FROM checks) + (SELECT count(*) FROM machines) + (SELECT count(*) FROM beams)"); n != 0 {
		t.Fatalf("a dry run wrote %d rows", n)
	}
}

// checkRows lists every stored check as comparable text: id, machine,
// beam, kind, time, setup, operator, device, note, correction and edges.
func checkRows(t *testing.T, url string) []string {
	t.Helper()
	ctx := context.Background()
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	rows, err := d.Pool.Query(ctx, `SELECT concat_ws('|', c.id, m.name, m.sad_cm, b.energy_mv, b.fff, c.kind, c.measured_at AT TIME ZONE 'UTC',
		c.ssd_cm, c.depth_cm, c.field_x_cm, c.field_y_cm, c.collimator_deg, c.gantry_deg, c.device, c.operator, c.note,
		c.supersedes, c.edges::text) FROM checks c JOIN machines m ON m.id = c.machine_id JOIN beams b ON b.id = c.beam_id ORDER BY c.id`)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var r string
		if err := rows.Scan(&r); err != nil {
			t.Fatal(err)
		}
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

// Export → import into an empty installation reproduces the same checks,
// corrections included, from CSV and from XLSX; re-importing an export
// into the installation it came from stores nothing new.
func TestExportImportRoundTrip(t *testing.T) {
	src := dbtest.New(t)
	p := writeFile(t, "log.csv", latin1(europeanLog))
	m := writeFile(t, "map.toml", []byte(strings.Replace(europeanMap, "kind = \"morning\"\n", "kind = \"morning\"\ndevice = \"diode array\"\nnote = \"from the 2024 log, \\\"as typed\\\"\"\n", 1)))
	if code, out, stderr := runCLI(t, src, "import", "checks", "--map", m, "--create-missing", p); code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, stderr)
	}
	ctx := context.Background()
	d, err := db.Open(ctx, src)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	list, err := d.Checks(ctx, halfmark.CheckFilter{})
	if err != nil || len(list) != 3 {
		t.Fatalf("%d checks, %v", len(list), err)
	}
	fix := list[0]
	fix.ID, fix.Supersedes, fix.Note = "", list[0].ID, "X2 retyped"
	fix.Edges = append([]halfmark.EdgeResult{}, fix.Edges...)
	fix.Edges[1].PositionMM = 50.05
	if _, _, err := d.RecordCheck(ctx, halfmark.CLIActor("test"), &fix); err != nil {
		t.Fatal(err)
	}
	want := checkRows(t, src)
	if len(want) != 4 {
		t.Fatalf("%d checks in the source", len(want))
	}
	dir := t.TempDir()
	for _, format := range []string{"csv", "xlsx"} {
		file := filepath.Join(dir, "checks."+format)
		if code, out, stderr := runCLI(t, src, "export", "checks", file); code != 0 || !strings.Contains(stderr, "exported: 4 checks, 16 edge results ("+format+")") {
			t.Fatalf("export %s: exit %d\n%s\n%s", format, code, out, stderr)
		}
		dst := dbtest.New(t)
		if code, out, stderr := runCLI(t, dst, "import", "checks", "--create-missing", file); code != 0 || !strings.Contains(out, "imported: 4 new checks") {
			t.Fatalf("import %s: exit %d\n%s\n%s", format, code, out, stderr)
		}
		got := checkRows(t, dst)
		if strings.Join(got, "\n") != strings.Join(want, "\n") {
			t.Errorf("%s round trip differs:\nwant %s\ngot  %s", format, strings.Join(want, "\n     "), strings.Join(got, "\n     "))
		}
		if code, out, _ := runCLI(t, src, "import", "checks", file); code != 0 || !strings.Contains(out, "imported: 0 new checks, 4 already stored") {
			t.Errorf("re-import of the %s export into its source: exit %d\n%s", format, code, out)
		}
	}
	// --machine and --from narrow the export: the two checks of 5 March and the correction of one of them.
	file := filepath.Join(dir, "some.csv")
	if code, _, stderr := runCLI(t, src, "export", "checks", "--machine", "Tern", "--from", "2024-03-05", file); code != 0 || !strings.Contains(stderr, "exported: 3 checks") {
		t.Errorf("filtered export: %d %s", code, stderr)
	}
}
