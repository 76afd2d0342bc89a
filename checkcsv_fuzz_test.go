package halfmark

import (
	"bytes"
	"testing"
	"time"
)

// FuzzReadChecksCSV: no input makes the import reader panic, and every row
// is either good or reported with a line number.
func FuzzReadChecksCSV(f *testing.F) {
	f.Add([]byte("machine,beam,kind,measured_at,edge,position_mm\nA,6 MV,morning,2024-01-02T07:00:00Z,X1,50\n"))
	f.Add([]byte("machine,beam,kind,measured_at,edge,position_mm,penumbra_mm,ssd_cm,depth_cm\nA,6FFF,monthly,2024-01-02 07:00,B1P23,-3,2.5,90,10\n\"unterminated\n"))
	f.Add([]byte("\ufeffmachine;beam\n\x00\xff"))
	now := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, bad, err := ReadChecksCSV(bytes.NewReader(data), now)
		if err != nil {
			return
		}
		for _, b := range bad {
			if b.Line <= 0 {
				t.Fatalf("bad row without a line number: %+v", b)
			}
		}
		for _, r := range rows {
			if len(r.Check.Edges) != 1 || r.Line <= 0 {
				t.Fatalf("row %+v", r)
			}
		}
		_, _, _ = GroupCSVRows(rows, func(m, b string) (int64, int64, error) { return 1, 1, nil })
	})
}
