package sheet

import (
	"bytes"
	"fmt"
	"strings"

	"github.com/xuri/excelize/v2"
)

// xlsxLimits bound what a workbook may unpack to (256 MiB in all, 64 MiB
// per worksheet), so an upload cannot exhaust memory.
var xlsxLimits = excelize.Options{UnzipSizeLimit: 256 << 20, UnzipXMLSizeLimit: 64 << 20}

// readXLSX reads every sheet of a workbook, or the ones the options or
// the mapping name. Cells are read raw: numbers as stored (dates as
// serial numbers), so the decimal mark is the point, or a lone comma in a
// cell typed as text. A sheet whose header lacks the mapped columns is
// refused as a whole when the sheets were not named, and fails the import
// when they were.
func readXLSX(data []byte, m *Mapping, opt Options) (*Result, error) {
	f, err := excelize.OpenReader(bytes.NewReader(data), xlsxLimits)
	if err != nil {
		return nil, fmt.Errorf("the file starts like an XLSX workbook but cannot be opened as one: %v", err)
	}
	defer f.Close()
	all := f.GetSheetList()
	named := opt.Sheets
	if len(named) == 0 {
		named = m.Sheets
	}
	sheets := all
	if len(named) > 0 {
		sheets = nil
		for _, n := range named {
			found := ""
			for _, s := range all {
				if strings.EqualFold(s, n) {
					found = s
				}
			}
			if found == "" {
				return nil, fmt.Errorf("the workbook has no sheet %q; its sheets are: %s", n, quoteAll(all))
			}
			sheets = append(sheets, found)
		}
	}
	res := &Result{Format: "xlsx", Decimal: decimalAny, Sheets: sheets}
	for _, name := range sheets {
		rows, err := f.GetRows(name, excelize.Options{RawCellValue: true})
		if err != nil {
			return nil, fmt.Errorf("sheet %q cannot be read: %v", name, err)
		}
		var rd *tableReader
		for i, rec := range rows {
			line := i + 1
			if rd == nil {
				if (m.HeaderRow > 0 && line < m.HeaderRow) || (m.HeaderRow == 0 && blank(rec)) {
					continue
				}
				rd, err = newTableReader(m, opt, name, rec, decimalAny)
				if err != nil {
					if len(named) > 0 {
						return nil, fmt.Errorf("sheet %q: %v", name, err)
					}
					res.Refused = append(res.Refused, Refused{Sheet: name, Line: line, Reason: "sheet skipped: " + err.Error()})
					break
				}
				continue
			}
			rd.row(res, rec, line)
		}
	}
	return res, nil
}
