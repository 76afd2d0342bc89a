package web

import (
	"bytes"
	"context"
	"encoding/base64"
	"fmt"
	"io"
	"net/http"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/analysis/sheet"
)

// Importer stores read rows through the one import path (db.DB): the
// store resolves the file's machines and beams, sheet groups the rows into
// checks with them, the store validates and stores the checks.
type Importer interface {
	ResolveImport(ctx context.Context, a halfmark.Actor, pairs []halfmark.ImportPair, opt halfmark.ImportOptions) (*halfmark.ImportResolution, error)
	ImportChecks(ctx context.Context, a halfmark.Actor, in halfmark.ImportBatch, rz *halfmark.ImportResolution, opt halfmark.ImportOptions) (*halfmark.ImportReport, error)
}

// Exporter reads checks for the download (db.DB).
type Exporter interface {
	ExportChecks(ctx context.Context, f halfmark.CheckFilter) ([]halfmark.ExportCheck, error)
}

// maxImportBytes bounds an uploaded log (32 MiB); larger files go through
// `halfmark import checks`.
const maxImportBytes = 32 << 20

// previewShown is how many checks the preview lists as they will be stored.
const previewShown = 10

type importForm struct {
	Filename, Mapping, Decimal, DateFormat, Timezone string
	CreateMissing, SkipBad                           bool
	Content, MappingB64                              string // base64, only in the store form
}

type importData struct {
	Available bool
	Form      importForm
	Error     string
	Read      string // how the file was read
	Report    *sheet.ImportReport
	Shown     []importCheck
	Counts    []sheet.Count
	First     time.Time
	Last      time.Time
	Stored    bool
	Machines  []halfmark.Machine
}

type importCheck struct {
	Machine, Beam string
	Check         halfmark.Check
}

func (s *server) importPage(c echo.Context) error {
	return s.renderImport(c, http.StatusOK, importData{Form: importForm{Decimal: sheet.DecimalAuto}})
}

func (s *server) renderImport(c echo.Context, status int, d importData) error {
	d.Available = s.d.Import != nil
	ms, err := s.d.Machines.Machines(c.Request().Context())
	if err != nil {
		return s.failErr(c, err)
	}
	d.Machines = ms
	return s.render(c, status, "import", "Import and export", d)
}

func (s *server) importError(c echo.Context, f importForm, msg string) error {
	f.Content, f.MappingB64 = "", ""
	return s.renderImport(c, http.StatusUnprocessableEntity, importData{Form: f, Error: msg})
}

func readImportForm(c echo.Context) importForm {
	return importForm{Mapping: c.FormValue("mapping"), Decimal: c.FormValue("decimal"), DateFormat: c.FormValue("date_format"),
		Timezone: strings.TrimSpace(c.FormValue("timezone")), CreateMissing: c.FormValue("create_missing") != "",
		SkipBad: c.FormValue("skip_bad") != "", Filename: c.FormValue("filename")}
}

// importPreview reads the upload with the mapping and shows what would be
// stored, without storing anything.
func (s *server) importPreview(c echo.Context) error {
	if s.d.Import == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Importing is not available on this server.")
	}
	c.Request().Body = http.MaxBytesReader(c.Response(), c.Request().Body, maxImportBytes+1<<20)
	f := readImportForm(c)
	fh, err := c.FormFile("file")
	if err != nil {
		return s.importError(c, f, "Choose a file to import (CSV, TSV or XLSX).")
	}
	f.Filename = filepath.Base(fh.Filename)
	if fh.Size > maxImportBytes {
		return s.importError(c, f, fmt.Sprintf("The file is %d bytes; at most %d are accepted here. Import larger files with halfmark import checks.", fh.Size, maxImportBytes))
	}
	r, err := fh.Open()
	if err != nil {
		return s.importError(c, f, "The file could not be read: "+err.Error())
	}
	content, err := io.ReadAll(r)
	r.Close()
	if err != nil {
		return s.importError(c, f, "The file could not be read: "+err.Error())
	}
	return s.importRun(c, f, content, true)
}

// importStore reads the file that came back with the preview form again
// (the browser's copy of the preview is never trusted) and stores it.
func (s *server) importStore(c echo.Context) error {
	if s.d.Import == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Importing is not available on this server.")
	}
	c.Request().Body = http.MaxBytesReader(c.Response(), c.Request().Body, 2*maxImportBytes)
	f := readImportForm(c)
	content, err := base64.StdEncoding.DecodeString(c.FormValue("content"))
	m, err2 := base64.StdEncoding.DecodeString(c.FormValue("encoded_mapping"))
	if err != nil || err2 != nil || len(content) == 0 {
		return s.importError(c, f, "The uploaded file did not come back with the form; upload it again.")
	}
	f.Mapping = string(m)
	return s.importRun(c, f, content, false)
}

func (s *server) importRun(c echo.Context, f importForm, content []byte, dry bool) error {
	m := sheet.DefaultMapping()
	opt := sheet.Options{Decimal: f.Decimal, DateFormat: f.DateFormat, Now: s.d.Now()}
	if strings.TrimSpace(f.Mapping) != "" {
		var err error
		if m, err = sheet.ParseMapping([]byte(f.Mapping)); err != nil {
			return s.importError(c, f, "Mapping: "+err.Error())
		}
		if m.Timezone == "" {
			opt.Location = time.Local
		}
	}
	switch opt.Decimal {
	case "", sheet.DecimalAuto, sheet.DecimalComma, sheet.DecimalPoint:
	default:
		return s.importError(c, f, "Decimal mark: choose point, comma or automatic.")
	}
	switch opt.DateFormat {
	case "", sheet.DateDMY, sheet.DateMDY:
	default:
		return s.importError(c, f, "Slash dates: choose DD/MM/YYYY or MM/DD/YYYY.")
	}
	if f.Timezone != "" {
		loc, err := time.LoadLocation(f.Timezone)
		if err != nil {
			return s.importError(c, f, fmt.Sprintf("Time zone %q is not an IANA name such as Europe/Berlin.", f.Timezone))
		}
		opt.Location = loc
	}
	res, err := sheet.Read(content, m, opt)
	if err != nil {
		return s.importError(c, f, "The file cannot be read: "+err.Error())
	}
	ctx, actor := c.Request().Context(), user(c).Actor()
	iopt := halfmark.ImportOptions{CreateMissing: f.CreateMissing, SkipBad: f.SkipBad, DryRun: dry}
	rz, err := s.d.Import.ResolveImport(ctx, actor, sheet.Pairs(res.Rows), iopt)
	if err != nil {
		return s.failErr(c, err)
	}
	rep, err := s.d.Import.ImportChecks(ctx, actor, res.Batch(rz.Resolve), rz, iopt)
	if err != nil {
		return s.failErr(c, err)
	}
	d := importData{Form: f, Report: rep, Counts: rep.Counts(), Stored: !dry}
	d.First, d.Last = rep.Span()
	if res.Format == "xlsx" {
		d.Read = "XLSX workbook, sheets " + strings.Join(res.Sheets, ", ")
	} else {
		d.Read = fmt.Sprintf("text, separator %s, decimal %s", map[rune]string{',': "comma", ';': "semicolon", '\t': "tab"}[res.Separator], res.Decimal)
	}
	for i, ch := range rep.Checks {
		if i == previewShown {
			break
		}
		d.Shown = append(d.Shown, importCheck{Machine: rep.Machines[ch.MachineID], Beam: rep.Beams[ch.BeamID], Check: ch})
	}
	if dry {
		d.Form.Content = base64.StdEncoding.EncodeToString(content)
		d.Form.MappingB64 = base64.StdEncoding.EncodeToString([]byte(f.Mapping))
	}
	status := http.StatusOK
	if !dry && len(rep.Refused) > 0 && !f.SkipBad {
		status = http.StatusUnprocessableEntity
	}
	return s.renderImport(c, status, d)
}

// exportDownload writes checks in the long layout the importer reads.
func (s *server) exportDownload(c echo.Context) error {
	if s.d.Export == nil {
		return s.fail(c, http.StatusServiceUnavailable, "Exporting is not available on this server.")
	}
	var f halfmark.CheckFilter
	var problems []string
	if v := c.QueryParam("machine"); v != "" {
		id, err := strconv.ParseInt(v, 10, 64)
		if err != nil || id <= 0 {
			problems = append(problems, "machine: choose a machine from the list")
		}
		f.MachineID = id
	}
	for name, dst := range map[string]*time.Time{"from": &f.From, "to": &f.To} {
		if v := c.QueryParam(name); v != "" {
			t, err := time.ParseInLocation(time.DateOnly, v, time.Local)
			if err != nil {
				problems = append(problems, name+": give a date like 2024-03-01")
			}
			*dst = t
		}
	}
	format := c.QueryParam("format")
	if format == "" {
		format = "csv"
	}
	if format != "csv" && format != "xlsx" {
		problems = append(problems, "format: choose csv or xlsx")
	}
	if len(problems) > 0 {
		return s.fail(c, http.StatusBadRequest, "The export cannot be made: "+strings.Join(problems, "; ")+".")
	}
	cs, err := s.d.Export.ExportChecks(c.Request().Context(), f)
	if err != nil {
		return s.failErr(c, err)
	}
	var b bytes.Buffer
	ctype := "text/csv; charset=utf-8"
	if format == "xlsx" {
		err = sheet.WriteXLSX(&b, cs)
		ctype = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
	} else {
		err = sheet.WriteCSV(&b, cs)
	}
	if err != nil {
		return s.failErr(c, err)
	}
	name := "halfmark-checks-" + s.d.Now().Format("2006-01-02") + "." + format
	c.Response().Header().Set(echo.HeaderContentDisposition, `attachment; filename="`+name+`"`)
	return c.Blob(http.StatusOK, ctype, b.Bytes())
}
