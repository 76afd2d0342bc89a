package sheet

import (
	"encoding/csv"
	"io"
	"strconv"
	"time"

	"github.com/xuri/excelize/v2"

	"halfmark"
)

// ExportCheck is one stored check with its machine's name and its beam's
// label, as the export writes it (halfmark.ExportCheck).
type ExportCheck = halfmark.ExportCheck

// ExportColumns are the columns of the export: the long layout the
// importer reads (id and supersedes included, so a correction stays a
// correction), then columns for people — superseded_by marks a corrected
// check, created_at/created_by/analysis_version its provenance, and
// iso_position_mm, baseline_mm, deviation_mm, penumbra_deviation_mm the
// stored deviations — which the importer accepts and ignores.
var ExportColumns = []string{"id", "machine", "beam", "kind", "measured_at", "ssd_cm", "depth_cm", "field_x_cm", "field_y_cm",
	"collimator_deg", "gantry_deg", "device", "method", "operator", "note", "edge", "position_mm", "penumbra_mm", "light_position_mm",
	"supersedes", "superseded_by", "analysis_version", "created_at", "created_by",
	"iso_position_mm", "baseline_mm", "deviation_mm", "penumbra_deviation_mm"}

// exportRows calls row once per edge result with the cells of
// ExportColumns; numbers as float64 (nil when absent), the rest as text.
func exportRows(cs []ExportCheck, row func(cells []any) error) error {
	cells := make([]any, len(ExportColumns))
	opt := func(p *float64) any {
		if p == nil {
			return nil
		}
		return *p
	}
	for _, x := range cs {
		c := &x.Check
		for _, e := range c.Edges {
			s := c.Setup
			copy(cells, []any{c.ID, x.Machine, x.Beam, string(c.Kind), c.MeasuredAt.UTC().Format(time.RFC3339Nano),
				opt(s.SSDcm), opt(s.DepthCm), opt(s.FieldXcm), opt(s.FieldYcm), opt(s.CollimatorDeg), opt(s.GantryDeg),
				c.Device, string(c.Method), c.Operator, c.Note, e.Edge, e.PositionMM, opt(e.PenumbraMM), opt(e.LightPositionMM),
				c.Supersedes, c.SupersededBy, c.AnalysisVersion, c.CreatedAt.UTC().Format(time.RFC3339), c.CreatedBy,
				e.IsoPositionMM, opt(e.BaselineMM), opt(e.DeviationMM), opt(e.PenumbraDeviationMM)})
			if err := row(cells); err != nil {
				return err
			}
		}
	}
	return nil
}

// WriteCSV writes checks in the long layout as comma-separated UTF-8 text
// with a decimal point, one row per edge result. Numbers are written in
// the shortest form that reads back to the same float64.
func WriteCSV(w io.Writer, cs []ExportCheck) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(ExportColumns); err != nil {
		return err
	}
	rec := make([]string, len(ExportColumns))
	err := exportRows(cs, func(cells []any) error {
		for i, v := range cells {
			switch x := v.(type) {
			case nil:
				rec[i] = ""
			case float64:
				rec[i] = strconv.FormatFloat(x, 'g', -1, 64)
			case string:
				rec[i] = x
			}
		}
		return cw.Write(rec)
	})
	if err != nil {
		return err
	}
	cw.Flush()
	return cw.Error()
}

// WriteXLSX writes checks in the long layout as a one-sheet workbook
// ("checks"): numbers as numeric cells, times as ISO 8601 text in UTC.
func WriteXLSX(w io.Writer, cs []ExportCheck) error {
	f := excelize.NewFile()
	defer f.Close()
	const sheet = "checks"
	if err := f.SetSheetName("Sheet1", sheet); err != nil {
		return err
	}
	sw, err := f.NewStreamWriter(sheet)
	if err != nil {
		return err
	}
	header := make([]any, len(ExportColumns))
	for i, c := range ExportColumns {
		header[i] = c
	}
	if err := sw.SetRow("A1", header); err != nil {
		return err
	}
	n := 1
	err = exportRows(cs, func(cells []any) error {
		n++
		ref, err := excelize.CoordinatesToCellName(1, n)
		if err != nil {
			return err
		}
		return sw.SetRow(ref, cells)
	})
	if err != nil {
		return err
	}
	if err := sw.Flush(); err != nil {
		return err
	}
	return f.Write(w)
}
