package sheet

import "halfmark"

// ImportOptions say how read rows are stored (halfmark.ImportOptions).
type ImportOptions = halfmark.ImportOptions

// ImportReport says what an import did or, in a dry run, would do
// (halfmark.ImportReport).
type ImportReport = halfmark.ImportReport

// Count is the number of checks for one machine, beam and kind
// (halfmark.ImportCount).
type Count = halfmark.ImportCount

// SortRefused puts refused rows in sheet and line order.
func SortRefused(rs []Refused) { halfmark.SortImportRefused(rs) }
