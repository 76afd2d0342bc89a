package sheet

import (
	"testing"
)

// FuzzRead: no input makes a reader panic — text in any separator,
// encoding and layout, or a workbook — and every refused row has a line
// and every read row at least one edge.
func FuzzRead(f *testing.F) {
	f.Add([]byte("machine,beam,kind,measured_at,edge,position_mm\nA,6 MV,morning,2024-01-02T07:00:00Z,X1,50\n"), uint8(0))
	f.Add([]byte("machine,beam,kind,measured_at,edge,position_mm,penumbra_mm,ssd_cm,depth_cm\nA,6FFF,monthly,2024-01-02 07:00,B1P23,-3,2.5,90,10\n\"unterminated\n"), uint8(0))
	f.Add([]byte("\ufeffmachine;beam\n\x00\xff"), uint8(0))
	f.Add([]byte("Date;X1;X2;Pen X1\r\n04.03.2024 07:41;-50,2 mm;5,02 cm;0,3\r\n"), uint8(1))
	f.Add([]byte("Date\tX1\tX2\tPen X1\n45355.28125\t-50.2\t50\t3\n03/04/2024\t1,2.3\tx\t\n"), uint8(1))
	f.Add(to1252("Date;X1;X2;Pen X1\n04.03.2024;-50,2;50,1;Prüfung\n"), uint8(1))
	f.Add(twoSheetWorkbook(f), uint8(2))
	wide := mustParse(`layout = "wide"
timezone = "Europe/Berlin"
[columns]
measured_at = "Date"
X1 = "X1"
X2 = "X2"
penumbra.X1 = "Pen X1"
[constants]
machine = "Tern"
beam = "6 MV"
kind = "morning"
field_x_cm = 10`)
	sheets := mustParse(`layout = "wide"
[columns]
measured_at = "Date"
beam = "Energy"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
penumbra.X1 = "Pen X1"
[constants]
kind = "morning"
machine = "Tern"`)
	f.Fuzz(func(t *testing.T, data []byte, which uint8) {
		m := []*Mapping{DefaultMapping(), wide, sheets}[int(which)%3]
		res, err := Read(data, m, Options{Now: testNow, DateFormat: []string{"", DateDMY, DateMDY}[int(which)%3]})
		if err != nil {
			return
		}
		for _, r := range res.Refused {
			if r.Line <= 0 {
				t.Fatalf("refused row without a line: %+v", r)
			}
		}
		for _, r := range res.Rows {
			if len(r.Check.Edges) == 0 || r.Line <= 0 {
				t.Fatalf("row %+v", r)
			}
		}
		_, _, _ = Group(res.Rows, func(string, string) (int64, int64, error) { return 1, 1, nil })
		_, _ = Suggest(data)
	})
}

func mustParse(s string) *Mapping {
	m, err := ParseMapping([]byte(s))
	if err != nil {
		panic(err)
	}
	return m
}
