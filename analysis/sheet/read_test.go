package sheet

import (
	"bytes"
	"math"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/xuri/excelize/v2"

	"halfmark"
)

var testNow = time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)

func mustMapping(t *testing.T, s string) *Mapping {
	t.Helper()
	m, err := ParseMapping([]byte(s))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func read(t *testing.T, data []byte, m *Mapping, opt Options) *Result {
	t.Helper()
	opt.Now = testNow
	res, err := Read(data, m, opt)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

// to1252 encodes s (Latin-1 letters only) as Windows-1252 bytes.
func to1252(s string) []byte {
	var b []byte
	for _, r := range s {
		if r > 0xFF {
			panic("not in Latin-1")
		}
		b = append(b, byte(r))
	}
	return b
}

func near(a, b float64) bool { return math.Abs(a-b) < 1e-9 }

func edge(t *testing.T, c halfmark.Check, name string) halfmark.EdgeResult {
	t.Helper()
	for _, e := range c.Edges {
		if e.Edge == name {
			return e
		}
	}
	t.Fatalf("check has no edge %s: %+v", name, c.Edges)
	return halfmark.EdgeResult{}
}

const europeanMapping = `
layout = "wide"
decimal = "comma"
timezone = "Europe/Berlin"
[columns]
machine = "Gerät"
beam = "Energie"
measured_at = "Datum"
operator = "Kürzel"
note = "Bemerkung"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
Y1 = "Y1 (mm)"
Y2 = "Y2 (mm)"
penumbra.X1 = "Pen X1"
[constants]
kind = "morning"
field_x_cm = 10
field_y_cm = 10
[beams]
"6X" = "6 MV"
`

// A semicolon file with decimal commas, dotted dates and an umlaut,
// saved in Windows-1252 with CRLF line ends, as a spreadsheet program in
// much of Europe writes it. The values read are the values written.
func TestReadEuropeanSemicolonWindows1252(t *testing.T) {
	text := "Gerät;Energie;Datum;X1 (mm);X2 (mm);Y1 (mm);Y2 (mm);Pen X1;Kürzel;Bemerkung\r\n" +
		"Tern;6X;04.03.2024 07:41;-50,2;49,8;-50,1;50,3;3,1;RQ;Prüfung ok\r\n" +
		"Tern;6X;05.03.2024 07:39;-50,0;50,0;-49,9;50,1;;RQ;\r\n"
	res := read(t, to1252(text), mustMapping(t, europeanMapping), Options{})
	if len(res.Refused) != 0 || len(res.Rows) != 2 {
		t.Fatalf("refused %v, rows %d", res.Refused, len(res.Rows))
	}
	if res.Separator != ';' || res.Decimal != DecimalComma {
		t.Errorf("separator %q decimal %s", res.Separator, res.Decimal)
	}
	r := res.Rows[0]
	// 07:41 CET (UTC+1 in March before the change to summer time; IANA tz database) is 06:41 UTC.
	if want := time.Date(2024, 3, 4, 6, 41, 0, 0, time.UTC); !r.Check.MeasuredAt.Equal(want) {
		t.Errorf("time %v, want %v", r.Check.MeasuredAt, want)
	}
	if r.Machine != "Tern" || r.Beam != "6 MV" || r.Check.Operator != "RQ" || r.Check.Note != "Prüfung ok" {
		t.Errorf("row %+v", r)
	}
	if e := edge(t, r.Check, "X1"); !near(e.PositionMM, -50.2) || e.PenumbraMM == nil || !near(*e.PenumbraMM, 3.1) {
		t.Errorf("X1 %+v", e)
	}
	for name, want := range map[string]float64{"X2": 49.8, "Y1": -50.1, "Y2": 50.3} {
		if e := edge(t, r.Check, name); !near(e.PositionMM, want) {
			t.Errorf("%s = %v, want %v", name, e.PositionMM, want)
		}
	}
	if e := edge(t, res.Rows[1].Check, "X1"); e.PenumbraMM != nil {
		t.Errorf("an empty penumbra cell was read as %v", *e.PenumbraMM)
	}
}

const usMapping = `
layout = "wide"
date_format = "MM/DD/YYYY"
timezone = "America/Chicago"
[columns]
date = "Date"
time = "Time"
machine = "Linac"
beam = "Energy"
kind = "QA"
X1 = "X1"
X2 = "X2"
Y1 = "Y1"
Y2 = "Y2"
penumbra.Y1 = "Y1 penumbra"
[beams]
"6X" = "6 MV"
"10FFF" = "10 MV FFF"
`

// A comma-separated US-style log with a UTF-8 byte-order mark, month-first
// dates, a separate AM/PM time column and a decimal point.
func TestReadUSWideWithBOM(t *testing.T) {
	text := "\ufeffDate,Time,Linac,Energy,QA,X1,X2,Y1,Y2,Y1 penumbra,FS X\n" +
		"03/04/2024,7:41 AM,Heron,6X,morning,-50.1,50.2,-49.8,50.0,3.4,10.0\n" +
		"03/04/2024,7:45 AM,Heron,10FFF,morning,-50.3,50.1,-50.2,49.9,,10.0\n"
	res := read(t, []byte(text), mustMapping(t, usMapping), Options{})
	if len(res.Refused) != 0 || len(res.Rows) != 2 {
		t.Fatalf("refused %v, rows %d", res.Refused, len(res.Rows))
	}
	r := res.Rows[0]
	// 07:41 CST (UTC−6; US summer time starts 2024-03-10, IANA tz database) is 13:41 UTC on 4 March.
	if want := time.Date(2024, 3, 4, 13, 41, 0, 0, time.UTC); !r.Check.MeasuredAt.Equal(want) {
		t.Errorf("time %v, want %v", r.Check.MeasuredAt, want)
	}
	if res.Rows[1].Beam != "10 MV FFF" {
		t.Errorf("beam %q", res.Rows[1].Beam)
	}
	if e := edge(t, r.Check, "Y1"); !near(e.PositionMM, -49.8) || !near(*e.PenumbraMM, 3.4) {
		t.Errorf("Y1 %+v", e)
	}
	// Without a date format the same file is refused row by row, never guessed.
	m := mustMapping(t, strings.Replace(usMapping, `date_format = "MM/DD/YYYY"`, "", 1))
	res = read(t, []byte(text), m, Options{})
	if len(res.Rows) != 0 || len(res.Refused) != 2 || !strings.Contains(res.Refused[0].Reason, "DD/MM/YYYY or MM/DD/YYYY") {
		t.Fatalf("slash dates guessed: %+v", res.Refused)
	}
	// --date-format DD/MM/YYYY reads the same cell as 3 April.
	res = read(t, []byte(text), m, Options{DateFormat: DateDMY})
	if got := res.Rows[0].Check.MeasuredAt.In(time.UTC); got.Month() != time.April || got.Day() != 3 {
		t.Errorf("DD/MM/YYYY read %v", got)
	}
}

// The default long layout in each of the three separators, with both
// decimal marks, reads the same values.
func TestReadLongLayoutThreeSeparators(t *testing.T) {
	rows := [][]string{
		{"machine", "beam", "kind", "measured_at", "edge", "position_mm", "penumbra_mm", "ssd_cm", "depth_cm"},
		{"Plover", "6 MV", "monthly", "2024-03-04T07:41:00Z", "X1", "-50.25", "3.5", "90", "10"},
		{"Plover", "6 MV", "monthly", "2024-03-04T07:41:00Z", "B1P23", "-20.5", "", "90", "10"},
	}
	for _, tc := range []struct {
		sep   string
		comma bool
	}{{",", false}, {";", false}, {";", true}, {"\t", false}, {"\t", true}} {
		var b strings.Builder
		for _, r := range rows {
			line := strings.Join(r, tc.sep)
			if tc.comma {
				line = strings.ReplaceAll(line, ".", ",")
			}
			b.WriteString(line + "\r\n")
		}
		res := read(t, []byte(b.String()), nil, Options{})
		if len(res.Refused) != 0 || len(res.Rows) != 2 {
			t.Fatalf("sep %q comma %v: refused %v", tc.sep, tc.comma, res.Refused)
		}
		if string(res.Separator) != tc.sep {
			t.Errorf("separator %q detected as %q", tc.sep, res.Separator)
		}
		c := res.Rows[0].Check
		if !near(c.Edges[0].PositionMM, -50.25) || !near(*c.Edges[0].PenumbraMM, 3.5) || !near(*c.Setup.SSDcm, 90) || !near(*c.Setup.DepthCm, 10) {
			t.Errorf("sep %q comma %v: %+v", tc.sep, tc.comma, c)
		}
		if res.Rows[1].Check.Edges[0].Edge != "B1P23" || !near(res.Rows[1].Check.Edges[0].PositionMM, -20.5) {
			t.Errorf("MLC row %+v", res.Rows[1].Check.Edges)
		}
	}
}

// An XLSX workbook with one sheet per machine, written with excelize:
// machine from the sheet's constants, dates as serial numbers.
func TestReadTwoSheetWorkbookWithSerialDates(t *testing.T) {
	data := twoSheetWorkbook(t)
	m := mustMapping(t, `
layout = "wide"
timezone = "UTC"
[columns]
measured_at = "Date"
beam = "Energy"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
penumbra.X1 = "Pen X1"
[constants]
kind = "morning"
[sheet.Tern]
machine = "Tern"
[sheet.Heron]
machine = "Heron"
`)
	res := read(t, data, m, Options{})
	if len(res.Refused) != 0 || len(res.Rows) != 4 {
		t.Fatalf("refused %v, rows %d", res.Refused, len(res.Rows))
	}
	// The serial date's meaning is taken from excelize's own conversion (a general-purpose library).
	want, err := excelize.ExcelDateToTime(45355.28125, false)
	if err != nil {
		t.Fatal(err)
	}
	byMachine := map[string][]Row{}
	for _, r := range res.Rows {
		byMachine[r.Machine] = append(byMachine[r.Machine], r)
	}
	tern := byMachine["Tern"]
	if len(tern) != 2 || len(byMachine["Heron"]) != 2 {
		t.Fatalf("rows per machine: %v", byMachine)
	}
	if !tern[0].Check.MeasuredAt.Equal(want) || tern[0].Sheet != "Tern" || tern[0].Line != 2 {
		t.Errorf("first Tern row %v (sheet %q line %d), want %v", tern[0].Check.MeasuredAt, tern[0].Sheet, tern[0].Line, want)
	}
	if e := edge(t, tern[0].Check, "X1"); !near(e.PositionMM, -50.3) || !near(*e.PenumbraMM, 3.2) {
		t.Errorf("Tern X1 %+v", e)
	}
	if e := edge(t, byMachine["Heron"][1].Check, "X2"); !near(e.PositionMM, 49.6) {
		t.Errorf("Heron X2 %+v", e)
	}
	// Naming one sheet reads only it.
	res = read(t, data, m, Options{Sheets: []string{"heron"}})
	if len(res.Rows) != 2 || res.Rows[0].Machine != "Heron" {
		t.Errorf("--sheet heron read %d rows", len(res.Rows))
	}
}

func twoSheetWorkbook(t testing.TB) []byte {
	f := excelize.NewFile()
	defer f.Close()
	if err := f.SetSheetName("Sheet1", "Tern"); err != nil {
		t.Fatal(err)
	}
	if _, err := f.NewSheet("Heron"); err != nil {
		t.Fatal(err)
	}
	header := []any{"Date", "Energy", "X1 (mm)", "X2 (mm)", "Pen X1"}
	data := map[string][][]any{
		"Tern":  {{45355.28125, "6X", -50.3, 50.1, 3.2}, {45356.28125, "6 MV", -50.0, 50.0, nil}},
		"Heron": {{45355.3, "6FFF", -49.9, 50.2, 2.9}, {45356.3, "6FFF", -50.1, 49.6, 3.0}},
	}
	for sheet, rows := range data {
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

// Units in cells are read (mm, cm) or refused, never silently scaled; a
// value that reads like cm where mm is expected is refused unless the
// mapping says cm.
func TestReadUnitsInCellsAndCmLookingValues(t *testing.T) {
	const base = `
layout = "wide"
[columns]
measured_at = "Date"
X1 = "X1"
X2 = "X2"
penumbra.X1 = "Pen X1"
[constants]
machine = "Tern"
beam = "6 MV"
kind = "morning"
field_x_cm = 10
`
	text := "Date;X1;X2;Pen X1\n" +
		"2024-03-04 07:41;-50,2 mm;5,02 cm;0,31 cm\n" + // line 2: units in the cells, read
		"2024-03-05 07:41;-5,01;5,02;3\n" + // line 3: a 10 cm field with edges at ±5: cm
		"2024-03-06 07:41;-50,1;50,0;0,3\n" + // line 4: a 0.3 mm penumbra: cm
		"2024-03-07 07:41;-2 in;50,0;3\n" // line 5: inches refused
	res := read(t, []byte(text), mustMapping(t, base), Options{})
	if len(res.Rows) != 1 {
		t.Fatalf("rows %d, refused %v", len(res.Rows), res.Refused)
	}
	c := res.Rows[0].Check
	if !near(edge(t, c, "X1").PositionMM, -50.2) || !near(edge(t, c, "X2").PositionMM, 50.2) || !near(*edge(t, c, "X1").PenumbraMM, 3.1) {
		t.Errorf("units in cells: %+v", c.Edges)
	}
	want := map[int]string{3: "looks like cm", 4: "looks like cm", 5: "not mm or cm"}
	if len(res.Refused) != 3 {
		t.Fatalf("refused %v", res.Refused)
	}
	for _, r := range res.Refused {
		if !strings.Contains(r.Reason, want[r.Line]) || (r.Column == "" && !strings.Contains(r.Reason, "X1: ")) {
			t.Errorf("line %d: %v (want %q and a column)", r.Line, r, want[r.Line])
		}
	}
	// With units = "cm" line 3 reads as ±50 mm.
	res = read(t, []byte("Date;X1;X2;Pen X1\n2024-03-05 07:41;-5,01;5,02;\n"), mustMapping(t, base), Options{})
	if len(res.Refused) != 1 {
		t.Fatalf("units mm: %v", res.Refused)
	}
	res = read(t, []byte("Date;X1;X2;Pen X1\n2024-03-05 07:41;-5,01;5,02;\n"), mustMapping(t, "units = \"cm\"\n"+base), Options{})
	if len(res.Rows) != 1 || !near(edge(t, res.Rows[0].Check, "X1").PositionMM, -50.1) {
		t.Fatalf("units cm: %v %v", res.Rows, res.Refused)
	}
}

// Re-reading a file gives the same row-key ids; a wide row and the long
// rows with the same values group to the same check.
func TestRowKeyIDsWideAndLongAgree(t *testing.T) {
	wide := "Date,X1,X2\n2024-03-04 07:41,-50.2,49.8\n"
	long := "machine,beam,kind,measured_at,edge,position_mm\n" +
		"Tern,6 MV,morning,2024-03-04 07:41,X1,-50.2\nTern,6 MV,morning,2024-03-04 07:41,X2,49.8\n"
	m := mustMapping(t, `layout = "wide"
timezone = "UTC"
[columns]
measured_at = "Date"
X1 = "X1"
X2 = "X2"
[constants]
machine = "Tern"
beam = "6 MV"
kind = "morning"`)
	resolve := func(string, string) (int64, int64, error) { return 1, 7, nil }
	w1, _, _ := Group(read(t, []byte(wide), m, Options{}).Rows, resolve)
	w2, _, _ := Group(read(t, []byte(wide), m, Options{}).Rows, resolve)
	l, _, _ := Group(read(t, []byte(long), nil, Options{}).Rows, resolve)
	if len(w1) != 1 || len(l) != 1 || w1[0].ID != w2[0].ID || w1[0].ID != l[0].ID {
		t.Fatalf("ids differ: %v %v %v", w1, w2, l)
	}
	if w1[0].BodyHash() != l[0].BodyHash() {
		t.Errorf("the same check read wide and long differs")
	}
}

// Encodings other than UTF-8 and Windows-1252 are refused with a message
// that says how to save the file.
func TestDecodeRefusesOtherEncodings(t *testing.T) {
	for name, data := range map[string][]byte{
		"UTF-16LE":        {0xFF, 0xFE, 'm', 0, 'a', 0},
		"NUL bytes":       []byte("machine\x00beam"),
		"unassigned 1252": []byte("machine,beam\nT\x81rn,6 MV\n"),
	} {
		if _, err := DecodeText(data, EncodingAuto); err == nil || !strings.Contains(err.Error(), "UTF-8") {
			t.Errorf("%s: %v", name, err)
		}
	}
	// Windows-1252 0x80 is the euro sign and 0xE4 is ä (WHATWG Encoding Standard, index-windows-1252).
	s, err := DecodeText([]byte{0x80, 0xE4}, EncodingAuto)
	if err != nil || s != "€ä" {
		t.Errorf("1252: %q %v", s, err)
	}
	// A UTF-8 byte-order mark is dropped.
	if s, _ := DecodeText([]byte("\xef\xbb\xbfa"), EncodingAuto); s != "a" {
		t.Errorf("BOM kept: %q", s)
	}
}

func TestParseNumberAndDates(t *testing.T) {
	for _, tc := range []struct {
		s, dec string
		v      float64
		unit   string
		bad    bool
	}{
		{"50.2", DecimalPoint, 50.2, "", false},
		{"50,2", DecimalComma, 50.2, "", false},
		{"−3,5 mm", DecimalComma, -3.5, "mm", false},
		{"50,2", DecimalPoint, 0, "", true},
		{"50.2", DecimalComma, 0, "", true},
		{"1.234,5", DecimalComma, 0, "", true},
		{"abc", DecimalPoint, 0, "", true},
	} {
		v, u, err := parseNumber(tc.s, tc.dec)
		if (err != nil) != tc.bad || (!tc.bad && (!near(v, tc.v) || u != tc.unit)) {
			t.Errorf("parseNumber(%q, %s) = %v %q %v", tc.s, tc.dec, v, u, err)
		}
	}
	berlin, _ := time.LoadLocation("Europe/Berlin")
	for _, tc := range []struct {
		s, format string
		want      time.Time
	}{
		{"2024-03-04T07:41:00+02:00", "", time.Date(2024, 3, 4, 5, 41, 0, 0, time.UTC)},
		{"2024-03-04 07:41", "", time.Date(2024, 3, 4, 6, 41, 0, 0, time.UTC)},
		{"4.3.2024", "", time.Date(2024, 3, 3, 23, 0, 0, 0, time.UTC)},
		{"04.07.2024 07:41:30", "", time.Date(2024, 7, 4, 5, 41, 30, 0, time.UTC)}, // CEST, UTC+2
		{"04/03/2024 07:41", DateDMY, time.Date(2024, 3, 4, 6, 41, 0, 0, time.UTC)},
		{"03/04/2024 07:41", DateMDY, time.Date(2024, 3, 4, 6, 41, 0, 0, time.UTC)},
	} {
		got, err := parseTime(tc.s, tc.format, berlin)
		if err != nil || !got.Equal(tc.want) {
			t.Errorf("parseTime(%q) = %v %v, want %v", tc.s, got, err, tc.want)
		}
	}
	if _, err := parseTime("12345", "", time.UTC); err == nil {
		t.Error("a serial before 1990 was read as a date")
	}
}

func TestParseMappingRefusesWhatItCannotRead(t *testing.T) {
	for _, s := range []string{
		`layout = "tall"`,
		`layout = "wide"` + "\n[columns]\nmachine = \"M\"",
		`colums = 3`,
		`decimal = "dot"`,
		"layout = \"wide\"\n[columns]\nX1 = \"a\"\npenumbra.X7 = \"b\"",
		"[beams]\n\"Photon\" = \"Photon\"",
	} {
		if _, err := ParseMapping([]byte(s)); err == nil {
			t.Errorf("accepted %q", s)
		}
	}
}

// Suggest recognises the US log's titles; the suggestion parses and, with
// the date format and beams filled in, reads the file.
func TestSuggestReadsBack(t *testing.T) {
	text := "Date,Time,Linac,Energy,QA,X1,X2,Y1,Y2,Y1 penumbra,FS X\n03/04/2024,7:41 AM,Heron,6X,morning,-50.1,50.2,-49.8,50.0,3.4,10.0\n"
	s, err := Suggest([]byte(text))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`layout = "wide"`, `machine = "Linac"`, `beam = "Energy"`, `X1 = "X1"`, `penumbra.Y1 = "Y1 penumbra"`, `# ? = "FS X"`} {
		if !strings.Contains(s, want) {
			t.Errorf("suggestion lacks %s:\n%s", want, s)
		}
	}
	m := mustMapping(t, s)
	res := read(t, []byte(text), m, Options{DateFormat: DateMDY})
	if len(res.Rows) != 1 {
		t.Fatalf("suggested mapping: %v", res.Refused)
	}
}

// The export writes what the reader reads back: the same values, to the
// last bit, in CSV and in XLSX.
func TestExportReadsBack(t *testing.T) {
	pen, ssd, depth, light := 3.1234567890123, 90.0, 10.0, -49.5
	c := halfmark.StoredCheck{Check: halfmark.Check{ID: "0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60", Kind: halfmark.KindMonthly,
		MeasuredAt: time.Date(2024, 3, 4, 6, 41, 12, 345000000, time.UTC), Device: "EPID", Operator: "R. Quill", Note: "a, \"quoted\" note",
		Setup: halfmark.Setup{SSDcm: &ssd, DepthCm: &depth}, Supersedes: "1b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60"}}
	c.Edges = []halfmark.EdgeOutcome{
		{EdgeResult: halfmark.EdgeResult{Edge: "X1", PositionMM: -50.1 / 3, PenumbraMM: &pen, LightPositionMM: &light}},
		{EdgeResult: halfmark.EdgeResult{Edge: "B2P40", PositionMM: 20.000000000000004}},
	}
	in := []ExportCheck{{Machine: "Tern", Beam: "10 MV FFF", Check: c}}
	for name, write := range map[string]func(*bytes.Buffer) error{
		"csv":  func(b *bytes.Buffer) error { return WriteCSV(b, in) },
		"xlsx": func(b *bytes.Buffer) error { return WriteXLSX(b, in) },
	} {
		var b bytes.Buffer
		if err := write(&b); err != nil {
			t.Fatal(err)
		}
		res := read(t, b.Bytes(), nil, Options{})
		if len(res.Refused) != 0 || len(res.Rows) != 2 {
			t.Fatalf("%s: refused %v", name, res.Refused)
		}
		checks, _, _ := Group(res.Rows, func(string, string) (int64, int64, error) { return 1, 1, nil })
		if len(checks) != 1 {
			t.Fatalf("%s: %d checks", name, len(checks))
		}
		got := checks[0]
		if got.ID != c.ID || got.Supersedes != c.Supersedes || !got.MeasuredAt.Equal(c.MeasuredAt) || got.Note != c.Note ||
			got.Operator != c.Operator || got.Device != c.Device || *got.Setup.SSDcm != ssd || *got.Setup.DepthCm != depth {
			t.Errorf("%s: check %+v", name, got)
		}
		if res.Rows[0].Machine != "Tern" || res.Rows[0].Beam != "10 MV FFF" {
			t.Errorf("%s: machine %q beam %q", name, res.Rows[0].Machine, res.Rows[0].Beam)
		}
		for i, e := range got.Edges {
			w := c.Edges[i].EdgeResult
			// CSV is exact; XLSX numeric cells keep 15 significant digits (the spreadsheet limit excelize writes to).
			same := func(a, b float64) bool { return a == b || (name == "xlsx" && math.Abs(a-b) <= 1e-14*math.Abs(b)) }
			if e.Edge != w.Edge || !same(e.PositionMM, w.PositionMM) || (w.PenumbraMM != nil) != (e.PenumbraMM != nil) ||
				(w.PenumbraMM != nil && !same(*e.PenumbraMM, *w.PenumbraMM)) || (w.LightPositionMM != nil && !same(*e.LightPositionMM, *w.LightPositionMM)) {
				t.Errorf("%s: edge %+v, want %+v", name, e, w)
			}
		}
	}
}

// The shipped example mapping reads the shipped example log.
func TestShippedExampleMapping(t *testing.T) {
	mb, err := os.ReadFile("../../deploy/examples/wide-log.toml")
	if err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile("../../deploy/examples/wide-log.csv")
	if err != nil {
		t.Fatal(err)
	}
	res := read(t, data, mustMapping(t, string(mb)), Options{})
	if len(res.Refused) != 0 || len(res.Rows) != 2 {
		t.Fatalf("rows %d refused %v", len(res.Rows), res.Refused)
	}
	if r := res.Rows[1]; r.Beam != "6 MV FFF" || r.Check.Note != "nach Service" || !near(*edge(t, r.Check, "X2").PenumbraMM, 2.7) {
		t.Errorf("second row %+v", r)
	}
}
