package web

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"net/http"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/labstack/echo/v4"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"halfmark"
	"halfmark/analysis/epid"
	"halfmark/analysis/profile"
)

// maxUploadBytes bounds an uploaded profile or image (64 MiB).
const maxUploadBytes = 64 << 20

// Analysis versions recorded with raw data, so that a later analysis can
// tell which results to recompute.
const (
	profileAnalysisVersion = "halfmark-profile/1"
	epidAnalysisVersion    = "halfmark-epid-field/1"
)

var uploadKinds = []halfmark.CheckKind{halfmark.KindMonthly, halfmark.KindAnnual, halfmark.KindCommissioning, halfmark.KindPostService}

type monthlyData struct {
	Machines []halfmark.Machine
	Machine  *halfmark.Machine
	Beams    []halfmark.Beam
	Month    string
	Rows     []monthRow
	Saved    string
	Error    string
	Form     uploadForm
	Preview  *preview
	Kinds    []halfmark.CheckKind
	SignOffs []halfmark.AuditEntry
	Signed   bool
}

// monthRow says, for one beam, which checks of the month were done and
// which are missing.
type monthRow struct {
	Beam           halfmark.Beam
	Monthly        []halfmark.Check
	MorningDays    int
	MissingMorning []string // weekdays up to today without a morning check
}

type uploadForm struct {
	Machine, Beam, Type, Axis, Kind  string
	SSD, Depth, FieldX, FieldY       string
	Device, MeasuredAt, Filename, ID string
	Content                          string // base64, only in the save form
}

type preview struct {
	Edges    []halfmark.EdgeResult
	Pairs    []pairRow
	Plot     template.HTML
	Method   string
	Warnings []string
}

func monthBounds(month string) (time.Time, time.Time, bool) {
	t, err := time.ParseInLocation("2006-01", month, time.Local)
	if err != nil {
		return time.Time{}, time.Time{}, false
	}
	return t, t.AddDate(0, 1, 0), true
}

func (s *server) monthlyData(ctx context.Context, c echo.Context, machine, month string) (monthlyData, error) {
	now := s.d.Now()
	d := monthlyData{Month: month, Kinds: uploadKinds}
	if _, _, ok := monthBounds(month); !ok {
		d.Month = now.Format("2006-01")
	}
	ms, err := s.d.Machines.Machines(ctx)
	if err != nil {
		return d, err
	}
	d.Machines = ms
	id, _ := strconv.ParseInt(machine, 10, 64)
	if id == 0 && len(ms) > 0 {
		id = ms[0].ID
	}
	for i := range ms {
		if ms[i].ID == id {
			d.Machine = &ms[i]
		}
	}
	if d.Machine == nil {
		return d, nil
	}
	if d.Beams, err = s.d.Machines.Beams(ctx, id); err != nil {
		return d, err
	}
	from, to, _ := monthBounds(d.Month)
	for _, b := range d.Beams {
		r := monthRow{Beam: b}
		cs, err := s.d.Checks.Checks(ctx, halfmark.CheckFilter{MachineID: id, BeamID: b.ID, From: from, To: to, Limit: 2000})
		if err != nil {
			return d, err
		}
		days := map[string]bool{}
		for _, ch := range cs {
			switch ch.Kind {
			case halfmark.KindMorning:
				days[ch.MeasuredAt.Local().Format("2006-01-02")] = true
			default:
				r.Monthly = append(r.Monthly, ch)
			}
		}
		r.MorningDays = len(days)
		for day := from; day.Before(to) && !day.After(now); day = day.AddDate(0, 0, 1) {
			if wd := day.Weekday(); wd == time.Saturday || wd == time.Sunday {
				continue
			}
			if k := day.Format("2006-01-02"); !days[k] {
				r.MissingMorning = append(r.MissingMorning, day.Format("Jan 2"))
			}
		}
		d.Rows = append(d.Rows, r)
	}
	d.Form = uploadForm{Machine: strconv.FormatInt(id, 10), Type: "profile", Axis: "X", Kind: string(halfmark.KindMonthly),
		FieldX: "10", FieldY: "10", ID: uuid.NewString()}
	return d, nil
}

func (s *server) monthly(c echo.Context) error {
	d, err := s.monthlyData(c.Request().Context(), c, c.QueryParam("machine"), c.QueryParam("month"))
	if err != nil {
		return s.failErr(c, err)
	}
	d.Saved = c.QueryParam("saved")
	d.Signed = c.QueryParam("signed") == "1"
	if d.Machine != nil {
		if d.SignOffs, err = s.d.Audit.Audit(c.Request().Context(), "report", halfmark.ReportEntityID(d.Machine.ID, d.Month), 20); err != nil {
			return s.failErr(c, err)
		}
	}
	return s.render(c, http.StatusOK, "monthly", "Monthly log", d)
}

func (s *server) readForm(c echo.Context) uploadForm {
	f := uploadForm{}
	for k, p := range map[string]*string{"machine": &f.Machine, "beam": &f.Beam, "type": &f.Type, "axis": &f.Axis, "kind": &f.Kind,
		"ssd": &f.SSD, "depth": &f.Depth, "field_x": &f.FieldX, "field_y": &f.FieldY, "device": &f.Device,
		"measured_at": &f.MeasuredAt, "filename": &f.Filename, "check_id": &f.ID} {
		*p = strings.TrimSpace(c.FormValue(k))
	}
	return f
}

func (s *server) monthlyAnalyze(c echo.Context) error {
	c.Request().Body = http.MaxBytesReader(c.Response(), c.Request().Body, maxUploadBytes+1<<20)
	f := s.readForm(c)
	var content []byte
	fh, err := c.FormFile("file")
	if err == nil {
		f.Filename = filepath.Base(fh.Filename)
		if fh.Size > maxUploadBytes {
			return s.monthlyError(c, f, fmt.Sprintf("The file is %d bytes; at most %d are accepted.", fh.Size, maxUploadBytes))
		}
		r, err := fh.Open()
		if err == nil {
			content, err = io.ReadAll(r)
			r.Close()
		}
		if err != nil {
			return s.monthlyError(c, f, "The file could not be read: "+err.Error())
		}
	}
	if len(content) == 0 {
		return s.monthlyError(c, f, "Choose a profile (CSV) or an EPID image (DICOM) to upload.")
	}
	a, err := analyzeUpload(f, content)
	if err != nil {
		return s.monthlyError(c, f, err.Error())
	}
	d, err := s.monthlyData(c.Request().Context(), c, f.Machine, c.FormValue("month"))
	if err != nil {
		return s.failErr(c, err)
	}
	if !halfmark.IsUUID(f.ID) {
		f.ID = uuid.NewString()
	}
	if f.MeasuredAt == "" {
		// Fixed now, so that saving twice replays the same check.
		f.MeasuredAt = s.d.Now().Local().Format("2006-01-02T15:04")
	}
	f.Content = base64.StdEncoding.EncodeToString(content)
	d.Form = f
	d.Preview = &preview{Edges: a.edges, Method: a.method, Warnings: a.warnings, Pairs: a.pairs}
	if a.plot != nil {
		if d.Preview.Plot, err = inlineSVG(a.plot, vg.Points(720), vg.Points(300), "profile with 50, 80 and 20 % points"); err != nil {
			return s.failErr(c, err)
		}
	}
	return s.render(c, http.StatusOK, "monthly", "Monthly log", d)
}

func (s *server) monthlyError(c echo.Context, f uploadForm, msg string) error {
	d, err := s.monthlyData(c.Request().Context(), c, f.Machine, c.FormValue("month"))
	if err != nil {
		return s.failErr(c, err)
	}
	f.Content = ""
	if f.ID == "" {
		f.ID = uuid.NewString()
	}
	d.Form, d.Error = f, msg
	return s.render(c, http.StatusUnprocessableEntity, "monthly", "Monthly log", d)
}

// monthlySave analyses the file again (the browser's copy of the results
// is never trusted), records the check and attaches the raw file with the
// analysis. The check id comes from the preview, so a repeated save does
// not store the check twice.
func (s *server) monthlySave(c echo.Context) error {
	f := s.readForm(c)
	content, err := base64.StdEncoding.DecodeString(c.FormValue("content"))
	if err != nil || len(content) == 0 {
		return s.monthlyError(c, f, "The uploaded file did not come back with the form; upload it again.")
	}
	a, err := analyzeUpload(f, content)
	if err != nil {
		return s.monthlyError(c, f, err.Error())
	}
	mid, _ := strconv.ParseInt(f.Machine, 10, 64)
	bid, _ := strconv.ParseInt(f.Beam, 10, 64)
	chk := halfmark.Check{ID: f.ID, MachineID: mid, BeamID: bid, Kind: halfmark.CheckKind(f.Kind), Device: f.Device,
		Edges: a.edges, MeasuredAt: s.d.Now(), AnalysisVersion: a.version, Setup: a.setup}
	if u := user(c); u != nil {
		chk.Operator = u.Email
	}
	if f.MeasuredAt != "" {
		t, err := time.ParseInLocation("2006-01-02T15:04", f.MeasuredAt, time.Local)
		if err != nil {
			return s.monthlyError(c, f, "Measured at: give the date and time like 2026-03-02T07:45, or leave it empty for now.")
		}
		chk.MeasuredAt = t
	}
	ctx := c.Request().Context()
	opts, _ := json.Marshal(a.options)
	raw := halfmark.RawData{Kind: a.kind, Filename: f.Filename, Content: content, Options: opts, Analysis: a.result, AnalysisVersion: a.version}
	if raw.Filename == "" {
		raw.Filename = "upload"
	}
	st, err := s.saveWithRaw(ctx, user(c).Actor(), &chk, &raw)
	s.status.invalidate()
	if err != nil {
		if halfmark.ErrorCodeOf(err) == halfmark.EInvalid {
			return s.monthlyError(c, f, "Nothing was saved: "+err.Error())
		}
		return s.failErr(c, err)
	}
	month := st.MeasuredAt.Local().Format("2006-01")
	return c.Redirect(http.StatusSeeOther, "/monthly?machine="+f.Machine+"&month="+month+"&saved="+st.ID)
}

// uploadResult is an analysed upload turned into edge results.
type uploadResult struct {
	edges    []halfmark.EdgeResult
	pairs    []pairRow
	setup    halfmark.Setup
	kind     halfmark.RawKind
	options  any
	result   json.RawMessage
	version  string
	method   string
	warnings []string
	plot     *plot.Plot
}

func optNumber(raw, what string, lo, hi float64) (*float64, error) {
	if raw == "" {
		return nil, nil
	}
	v, ok := parseMM(raw)
	if !ok || v < lo || v > hi {
		return nil, fmt.Errorf("%s: %q is not a number between %g and %g", what, raw, lo, hi)
	}
	return &v, nil
}

// analyzeUpload runs the profile or EPID analysis on an uploaded file.
// A profile along X gives X1 = −(left 50 % position) and X2 = right 50 %
// position (positive on their own side, the halfmark edge convention);
// along Y, Y1 and Y2.
func analyzeUpload(f uploadForm, content []byte) (uploadResult, error) {
	var out uploadResult
	var err error
	if out.setup.FieldXcm, err = optNumber(f.FieldX, "Nominal field X (cm)", 0.1, halfmark.MaxFieldCM); err != nil {
		return out, err
	}
	if out.setup.FieldYcm, err = optNumber(f.FieldY, "Nominal field Y (cm)", 0.1, halfmark.MaxFieldCM); err != nil {
		return out, err
	}
	switch f.Type {
	case "profile":
		if out.setup.SSDcm, err = optNumber(f.SSD, "SSD (cm)", halfmark.MinSSDcm, halfmark.MaxSSDcm); err != nil {
			return out, err
		}
		if out.setup.DepthCm, err = optNumber(f.Depth, "Depth (cm)", 0, halfmark.MaxDepthCm); err != nil {
			return out, err
		}
		if out.setup.DepthCm != nil && out.setup.SSDcm == nil {
			return out, fmt.Errorf("give the SSD with the depth, so positions can be projected to the isocentre plane")
		}
		samples, err := profile.ParseCSV(bytes.NewReader(content))
		if err != nil {
			return out, fmt.Errorf("the profile file could not be read: %v; it needs two columns, position in mm and signal", err)
		}
		opt := profile.Options{}
		r, err := profile.Analyze(samples, opt)
		if err != nil {
			return out, fmt.Errorf("the profile could not be analysed: %v", err)
		}
		lo, hi := "X1", "X2"
		if f.Axis == "Y" {
			lo, hi = "Y1", "Y2"
		}
		lp, rp := r.LeftPenumbraMM, r.RightPenumbraMM
		out.edges = []halfmark.EdgeResult{{Edge: lo, PositionMM: -r.LeftEdgeMM, PenumbraMM: &lp}, {Edge: hi, PositionMM: r.RightEdgeMM, PenumbraMM: &rp}}
		out.pairs = []pairRow{{Axis: lo[:1], SizeMM: r.FieldSizeMM, CentreMM: r.CentreMM}}
		out.kind, out.version, out.method, out.warnings = halfmark.RawProfile, profileAnalysisVersion, r.Method, r.Warnings
		out.options = map[string]any{"axis": lo[:1], "options": opt}
		out.result, _ = json.Marshal(r)
		out.plot = profilePlot(samples, r)
	case "image":
		img, err := epid.DecodeDICOMBytes(content, epid.DecodeOptions{})
		if err != nil {
			return out, fmt.Errorf("the EPID image could not be read: %v", err)
		}
		opt := epid.FieldOptions{}
		r, err := epid.AnalyzeField(img, opt)
		if err != nil {
			return out, fmt.Errorf("the EPID image could not be analysed: %v", err)
		}
		for _, e := range []struct {
			name string
			v    float64
		}{{"X1", r.X1MM}, {"X2", r.X2MM}, {"Y1", r.Y1MM}, {"Y2", r.Y2MM}} {
			er := halfmark.EdgeResult{Edge: e.name, PositionMM: e.v}
			if p, ok := r.PenumbraMM[e.name]; ok {
				er.PenumbraMM = &p
			}
			out.edges = append(out.edges, er)
		}
		out.setup.GantryDeg, out.setup.CollimatorDeg = r.GantryDeg, r.CollimatorDeg
		out.pairs = []pairRow{{Axis: "X", SizeMM: r.FieldXMM, CentreMM: r.CentreXMM}, {Axis: "Y", SizeMM: r.FieldYMM, CentreMM: r.CentreYMM}}
		out.kind, out.version, out.warnings = halfmark.RawImage, epidAnalysisVersion, r.Warnings
		out.method = "EPID field edges at the isocentre plane (50 % of central value above background)"
		out.options = opt
		out.result, _ = json.Marshal(r)
	default:
		return out, fmt.Errorf("choose the file type: a profile (CSV) or an EPID image (DICOM)")
	}
	return out, nil
}

// profilePlot draws the normalised profile with its 50 % edges and 80 %
// and 20 % points marked by distinct shapes.
func profilePlot(samples []profile.Sample, r profile.Result) *plot.Plot {
	p := plot.New()
	sansFonts(p, vg.Points(9))
	p.Title.Text = fmt.Sprintf("Profile: field %.2f mm, centre %+.2f mm", r.FieldSizeMM, r.CentreMM)
	p.X.Label.Text = "position (mm)"
	p.Y.Label.Text = "% of normalisation"
	norm := r.NormalisationSignal
	if norm == 0 {
		norm = 1
	}
	xy := make(plotter.XYs, len(samples))
	for i, s := range samples {
		xy[i] = plotter.XY{X: s.PositionMM, Y: 100 * s.Signal / norm}
	}
	if l, err := plotter.NewLine(xy); err == nil {
		l.Color, l.Width = pointColour, vg.Points(1)
		p.Add(l)
	}
	mark := func(pts plotter.XYs, shape draw.GlyphDrawer, c color.Color, name string) {
		if s, err := plotter.NewScatter(pts); err == nil {
			s.Shape, s.Color, s.Radius = shape, c, vg.Points(4)
			p.Add(s)
			p.Legend.Add(name, s)
		}
	}
	mark(plotter.XYs{{X: r.LeftEdgeMM, Y: 50}, {X: r.RightEdgeMM, Y: 50}}, draw.CircleGlyph{}, signalColour, "50 % edge")
	mark(plotter.XYs{{X: r.Left80MM, Y: 80}, {X: r.Right80MM, Y: 80}}, draw.TriangleGlyph{}, controlColour, "80 %")
	mark(plotter.XYs{{X: r.Left20MM, Y: 20}, {X: r.Right20MM, Y: 20}}, draw.SquareGlyph{}, trendColour, "20 %")
	p.Legend.Top = true
	p.Y.Min = 0
	return p
}

// checkRawRecorder stores a check and its raw data in one transaction; the
// PostgreSQL store implements it.
type checkRawRecorder interface {
	RecordCheckWithRaw(ctx context.Context, a halfmark.Actor, c *halfmark.Check, r *halfmark.RawData) (halfmark.StoredCheck, bool, error)
}

// saveWithRaw stores the check and its raw file together when the store
// can (all or nothing); otherwise it records the check, then attaches the
// file unless a replay already has it.
func (s *server) saveWithRaw(ctx context.Context, a halfmark.Actor, chk *halfmark.Check, raw *halfmark.RawData) (halfmark.StoredCheck, error) {
	if rec, ok := s.d.Checks.(checkRawRecorder); ok {
		st, _, err := rec.RecordCheckWithRaw(ctx, a, chk, raw)
		return st, err
	}
	st, _, err := s.d.Checks.RecordCheck(ctx, a, chk)
	if err != nil {
		return st, err
	}
	existing, err := s.d.Raw.RawForCheck(ctx, st.ID)
	if err != nil || len(existing) > 0 {
		return st, err
	}
	raw.CheckID = st.ID
	return st, s.d.Raw.AttachRaw(ctx, a, raw)
}
