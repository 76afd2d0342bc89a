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
	"net/url"
	"path/filepath"
	"sort"
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
	"halfmark/analysis/profile"
	"halfmark/analysis/rawdata"
)

// maxUploadBytes bounds an uploaded profile or image (64 MiB).
const maxUploadBytes = 64 << 20

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
	// Verdicts are the stored evaluations of the saved check's series;
	// VerdictsShown is false when the store offers none.
	Verdicts      []edgeVerdictRow
	VerdictsShown bool
}

// edgeVerdictRow is one edge of a saved check with the level its series was
// last evaluated at, or "evaluation pending".
type edgeVerdictRow struct {
	halfmark.EdgeVerdict
	Text string
}

// monthRow says, for one beam, which checks of the month were done and
// which are missing.
type monthRow struct {
	Beam           halfmark.Beam
	Monthly        []monthCheck
	Done           bool     // every axis of the required set is in
	MissingAxes    []string // axes of the required set not yet measured
	MorningDays    int
	MissingMorning []string // weekdays up to today without a morning check
}

// monthCheck is a non-morning check with what it was computed from.
type monthCheck struct {
	halfmark.Check
	Provenance string
}

// requiredAxes is a beam's monthly set: the X jaws (X1, X2) and the Y jaws
// (Y1, Y2), whether from two profiles or one image.
var requiredAxes = []string{"X", "Y"}

// provenance says what a check's edges came from: the raw file kept with
// it, a file or image analysed but not kept, or values typed in.
func provenance(c halfmark.Check, raw []halfmark.RawData) string {
	if len(raw) > 0 {
		switch raw[0].Kind {
		case halfmark.RawProfile:
			return "profile " + raw[0].Filename
		case halfmark.RawImage, halfmark.RawPicket:
			return "image " + raw[0].Filename
		}
		return string(raw[0].Kind) + " " + raw[0].Filename
	}
	if c.AnalysisVersion == "" {
		return "typed"
	}
	for _, e := range c.Edges {
		if strings.HasPrefix(e.Edge, "B") || strings.Contains(strings.ToUpper(c.Device), "EPID") {
			return "image, not kept"
		}
	}
	return "file, not kept"
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
	Blocks   []resultBlock
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
		axes := map[string]bool{}
		for _, ch := range cs {
			switch ch.Kind {
			case halfmark.KindMorning:
				days[ch.MeasuredAt.Local().Format("2006-01-02")] = true
			default:
				// The list carries no edges; the month's few non-morning
				// checks are read one by one.
				full, err := s.d.Checks.Check(ctx, ch.ID)
				if err != nil {
					return d, err
				}
				ch = full.Check
				raw, err := s.d.Raw.RawForCheck(ctx, ch.ID)
				if err != nil {
					return d, err
				}
				r.Monthly = append(r.Monthly, monthCheck{Check: ch, Provenance: provenance(ch, raw)})
				if ch.Kind == halfmark.KindMonthly {
					for _, e := range ch.Edges {
						if n := e.Edge; len(n) == 2 && (n[1] == '1' || n[1] == '2') {
							axes[n[:1]] = true
						}
					}
				}
			}
		}
		for _, a := range requiredAxes {
			if !axes[a] {
				r.MissingAxes = append(r.MissingAxes, a)
			}
		}
		r.Done = len(r.MissingAxes) == 0
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
	if d.Saved != "" && s.d.Verdicts != nil {
		if d.Verdicts, err = s.verdicts(c.Request().Context(), d.Saved); err != nil {
			return s.failErr(c, err)
		}
		d.VerdictsShown = true
	}
	// The setup of the last saved profile stays for the next one.
	if d.Saved != "" {
		q := c.QueryParams()
		d.Form.Beam, d.Form.Kind, d.Form.Type, d.Form.Axis = q.Get("beam"), q.Get("kind"), q.Get("type"), q.Get("axis")
		d.Form.SSD, d.Form.Depth, d.Form.FieldX, d.Form.FieldY, d.Form.Device = q.Get("ssd"), q.Get("depth"), q.Get("field_x"), q.Get("field_y"), q.Get("device")
		if d.Form.Type == "" {
			d.Form.Type = "profile"
		}
		if d.Form.Kind == "" {
			d.Form.Kind = string(halfmark.KindMonthly)
		}
		for _, r := range d.Rows {
			if strconv.FormatInt(r.Beam.ID, 10) == d.Form.Beam && len(r.MissingAxes) > 0 {
				d.Form.Axis = r.MissingAxes[0] // offer the axis still missing
			}
		}
	}
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
	d.Preview = &preview{Edges: a.edges, Method: a.method, Warnings: a.warnings, Blocks: a.blocks, Pairs: a.pairs}
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
		Edges: a.edges, MeasuredAt: s.d.Now(), AnalysisVersion: rawdata.Version, Setup: a.setup}
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
	raw := halfmark.RawData{Kind: a.kind, Filename: f.Filename, Content: content, Options: a.options, Analysis: a.analysis, AnalysisVersion: rawdata.Version}
	if raw.Filename == "" {
		raw.Filename = "upload"
	}
	st, _, err := s.d.Checks.RecordCheckWithRaw(ctx, user(c).Actor(), &chk, &raw)
	s.status.invalidate()
	if err != nil {
		if halfmark.ErrorCodeOf(err) == halfmark.EInvalid {
			return s.monthlyError(c, f, "Nothing was saved: "+err.Error())
		}
		return s.failErr(c, err)
	}
	q := url.Values{"machine": {f.Machine}, "month": {st.MeasuredAt.Local().Format("2006-01")}, "saved": {st.ID},
		"beam": {f.Beam}, "kind": {f.Kind}, "type": {f.Type}, "axis": {f.Axis},
		"ssd": {f.SSD}, "depth": {f.Depth}, "field_x": {f.FieldX}, "field_y": {f.FieldY}, "device": {f.Device}}
	return c.Redirect(http.StatusSeeOther, "/monthly?"+q.Encode())
}

// verdicts reads the stored evaluation of each series the check feeds; the
// dashboard never computes a level itself.
func (s *server) verdicts(ctx context.Context, checkID string) ([]edgeVerdictRow, error) {
	vs, err := s.d.Verdicts.CheckVerdicts(ctx, checkID)
	if err != nil {
		return nil, err
	}
	out := make([]edgeVerdictRow, len(vs))
	for i, v := range vs {
		out[i] = edgeVerdictRow{EdgeVerdict: v, Text: verdictText(v)}
	}
	return out, nil
}

func verdictText(v halfmark.EdgeVerdict) string {
	switch {
	case !v.Evaluated:
		return "evaluation pending"
	case v.Level == halfmark.LevelInControl:
		return "Level 0 — no signal"
	case v.Rule != "":
		return v.Level.String() + " (" + v.Rule + ")"
	}
	return v.Level.String()
}

// uploadResult is an analysed upload: what analysis/rawdata computed, plus
// what the page shows beside it.
type uploadResult struct {
	edges    []halfmark.EdgeResult
	pairs    []pairRow
	setup    halfmark.Setup
	kind     halfmark.RawKind
	options  json.RawMessage // the rawdata options, stored with the raw file
	analysis json.RawMessage // rawdata's result, stored with the raw file
	method   string
	warnings []string
	blocks   []resultBlock
	plot     *plot.Plot
}

// resultBlock is one object the analysis result carries beside its
// numbers (for example the geometry an image was measured with), shown as
// it is.
type resultBlock struct {
	Name string
	Rows []resultRow
}

type resultRow struct{ Key, Value string }

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

// uploadOptions is the rawdata options document for the form: the same
// shape the API takes and recompute reads back.
func uploadOptions(f uploadForm) (halfmark.RawKind, json.RawMessage, error) {
	var v any
	var kind halfmark.RawKind
	switch f.Type {
	case "profile":
		kind, v = halfmark.RawProfile, rawdata.ProfileParams{Axis: f.Axis}
	case "image":
		kind, v = halfmark.RawImage, rawdata.ImageParams{}
	default:
		return "", nil, fmt.Errorf("choose the file type: a profile (CSV) or an EPID image (DICOM)")
	}
	b, err := json.Marshal(v)
	return kind, b, err
}

// analyzeUpload runs analysis/rawdata on an uploaded file, as the API and
// recompute do, and reads what the page shows from its result.
func analyzeUpload(f uploadForm, content []byte) (uploadResult, error) {
	var out uploadResult
	var err error
	if out.setup.FieldXcm, err = optNumber(f.FieldX, "Nominal field X (cm)", 0.1, halfmark.MaxFieldCM); err != nil {
		return out, err
	}
	if out.setup.FieldYcm, err = optNumber(f.FieldY, "Nominal field Y (cm)", 0.1, halfmark.MaxFieldCM); err != nil {
		return out, err
	}
	if f.Type == "profile" {
		if out.setup.SSDcm, err = optNumber(f.SSD, "SSD (cm)", halfmark.MinSSDcm, halfmark.MaxSSDcm); err != nil {
			return out, err
		}
		if out.setup.DepthCm, err = optNumber(f.Depth, "Depth (cm)", 0, halfmark.MaxDepthCm); err != nil {
			return out, err
		}
		if out.setup.DepthCm != nil && out.setup.SSDcm == nil {
			return out, fmt.Errorf("give the SSD with the depth, so positions can be projected to the isocentre plane")
		}
	}
	if out.kind, out.options, err = uploadOptions(f); err != nil {
		return out, err
	}
	if out.analysis, out.edges, err = rawdata.Analyze(out.kind, content, out.options); err != nil {
		if out.kind == halfmark.RawImage {
			return out, fmt.Errorf("the EPID image could not be read or analysed: %v", err)
		}
		return out, fmt.Errorf("the profile could not be analysed: %v; it needs two columns, position in mm and signal", err)
	}
	out.warnings, out.blocks = resultExtras(out.analysis)
	switch out.kind {
	case halfmark.RawProfile:
		var r profile.Result
		if err := json.Unmarshal(out.analysis, &r); err != nil {
			return out, err
		}
		out.pairs = []pairRow{{Axis: out.edges[0].Edge[:1], SizeMM: r.FieldSizeMM, CentreMM: r.CentreMM}}
		out.method = r.Method
		// The plot needs the samples; rawdata parsed the same bytes already.
		if samples, err := profile.ParseCSV(bytes.NewReader(content)); err == nil {
			out.plot = profilePlot(samples, r)
		}
	case halfmark.RawImage:
		var r struct {
			FieldXMM      float64  `json:"field_x_mm"`
			FieldYMM      float64  `json:"field_y_mm"`
			CentreXMM     float64  `json:"centre_x_mm"`
			CentreYMM     float64  `json:"centre_y_mm"`
			GantryDeg     *float64 `json:"gantry_deg"`
			CollimatorDeg *float64 `json:"collimator_deg"`
		}
		if err := json.Unmarshal(out.analysis, &r); err != nil {
			return out, err
		}
		out.setup.GantryDeg, out.setup.CollimatorDeg = r.GantryDeg, r.CollimatorDeg
		out.pairs = []pairRow{{Axis: "X", SizeMM: r.FieldXMM, CentreMM: r.CentreXMM}, {Axis: "Y", SizeMM: r.FieldYMM, CentreMM: r.CentreYMM}}
		out.method = "EPID field edges at the isocentre plane (50 % of central value above background)"
	}
	return out, nil
}

// resultExtras reads the warnings and every block named "…_used" (such as
// geometry_used: the geometry an image was measured with) from an analysis
// result, whatever fields they carry.
func resultExtras(analysis json.RawMessage) ([]string, []resultBlock) {
	var top map[string]json.RawMessage
	if json.Unmarshal(analysis, &top) != nil {
		return nil, nil
	}
	var warnings []string
	_ = json.Unmarshal(top["warnings"], &warnings)
	var blocks []resultBlock
	for _, name := range sortedKeys(top) {
		if !strings.HasSuffix(name, "_used") {
			continue
		}
		var fields map[string]any
		if json.Unmarshal(top[name], &fields) != nil {
			blocks = append(blocks, resultBlock{Name: name, Rows: []resultRow{{Key: name, Value: string(top[name])}}})
			continue
		}
		b := resultBlock{Name: name}
		for _, k := range sortedKeys(fields) {
			v := fields[k]
			var text string
			switch x := v.(type) {
			case string:
				text = x
			case nil:
				text = "—"
			default:
				j, _ := json.Marshal(x)
				text = string(j)
			}
			b.Rows = append(b.Rows, resultRow{Key: k, Value: text})
		}
		blocks = append(blocks, b)
	}
	return warnings, blocks
}

func sortedKeys[V any](m map[string]V) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
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
