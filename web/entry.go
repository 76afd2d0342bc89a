package web

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"regexp"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/labstack/echo/v4"

	"halfmark"
)

// consoleCookie remembers, per device (browser), the machine and beam and
// the measuring device used at that console, so a morning check needs
// only the four numbers.
const consoleCookie = "hm_console"

var jaws = []string{"X1", "X2", "Y1", "Y2"}

type beamChoice struct {
	Value, Label string
	MachineID    int64
	BeamID       int64
}

type entryData struct {
	Choices  []beamChoice
	Selected string
	Values   map[string]string
	Errors   map[string]string
	Problem  string
	Verdict  *verdict
	CheckID  string
	Focus    string
	Jaws     []string
}

type verdictRow struct {
	Edge        string
	ValueMM     float64
	DeviationMM *float64
	Limits      halfmark.Limits
	HasLimits   bool
	Level       halfmark.Level
	Text        string
	PenDevMM    *float64
	Estimated   bool // the baseline was estimated, not set
}

type verdict struct {
	Machine, Beam string
	At            time.Time
	CheckID       string
	Created       bool
	Rows          []verdictRow
	Worst         halfmark.Level
}

func (s *server) beamChoices(ctx context.Context) ([]beamChoice, error) {
	ms, err := s.d.Machines.Machines(ctx)
	if err != nil {
		return nil, err
	}
	var out []beamChoice
	for _, m := range ms {
		bs, err := s.d.Machines.Beams(ctx, m.ID)
		if err != nil {
			return nil, err
		}
		for _, b := range bs {
			out = append(out, beamChoice{Value: fmt.Sprintf("%d:%d", m.ID, b.ID), Label: m.Name + " — " + b.Label, MachineID: m.ID, BeamID: b.ID})
		}
	}
	return out, nil
}

// console reads the remembered choice and device.
func console(c echo.Context) (choice, device string) {
	ck, err := c.Cookie(consoleCookie)
	if err != nil {
		return "", ""
	}
	v, err := url.ParseQuery(ck.Value)
	if err != nil {
		return "", ""
	}
	return v.Get("beam"), v.Get("device")
}

func rememberConsole(c echo.Context, choice, device string) {
	v := url.Values{"beam": {choice}, "device": {device}}
	c.SetCookie(&http.Cookie{Name: consoleCookie, Value: v.Encode(), Path: "/", MaxAge: 400 * 24 * 3600,
		HttpOnly: true, SameSite: http.SameSiteLaxMode, Secure: secure(c)})
}

func (s *server) entryPage(c echo.Context) error {
	choices, err := s.beamChoices(c.Request().Context())
	if err != nil {
		return s.failErr(c, err)
	}
	sel, device := console(c)
	if q := c.QueryParam("machine"); q != "" {
		for _, ch := range choices {
			if strconv.FormatInt(ch.MachineID, 10) == q {
				if !strings.HasPrefix(sel, q+":") {
					sel = ch.Value
				}
				break
			}
		}
	}
	d := entryData{Choices: choices, Selected: sel, Jaws: jaws, CheckID: uuid.NewString(), Focus: "x1",
		Values: map[string]string{"device": device, "field_x": "10", "field_y": "10"}, Errors: map[string]string{}}
	return s.render(c, http.StatusOK, "entry", "Morning check", d)
}

var edgeIndex = regexp.MustCompile(`^edges\[(\d+)\]\.(\w+)$`)

// entrySave records a morning check. Every field is checked first; when
// anything is wrong nothing is stored (RecordCheck is all-or-nothing) and
// each message is shown beside its field.
func (s *server) entrySave(c echo.Context) error {
	ctx := c.Request().Context()
	choices, err := s.beamChoices(ctx)
	if err != nil {
		return s.failErr(c, err)
	}
	d := entryData{Choices: choices, Jaws: jaws, Values: map[string]string{}, Errors: map[string]string{}}
	for _, k := range []string{"beam", "device", "field_x", "field_y", "measured_at", "note", "check_id"} {
		d.Values[k] = strings.TrimSpace(c.FormValue(k))
	}
	for _, j := range jaws {
		l := strings.ToLower(j)
		for _, k := range []string{l, "pen_" + l, "light_" + l} {
			d.Values[k] = strings.TrimSpace(c.FormValue(k))
		}
	}
	d.Selected = d.Values["beam"]
	d.CheckID = d.Values["check_id"]
	if !halfmark.IsUUID(d.CheckID) {
		d.CheckID = uuid.NewString()
	}
	var choice *beamChoice
	for i := range choices {
		if choices[i].Value == d.Selected {
			choice = &choices[i]
		}
	}
	if choice == nil {
		d.Errors["beam"] = "Choose the machine and beam."
	}
	number := func(key, what string, required bool, lo, hi float64) *float64 {
		raw := d.Values[key]
		if raw == "" {
			if required {
				d.Errors[key] = what + " is required (mm from the central axis, e.g. 50.0)."
			}
			return nil
		}
		v, ok := parseMM(raw)
		if !ok || math.IsNaN(v) || math.IsInf(v, 0) {
			d.Errors[key] = fmt.Sprintf("%q is not a number; type it like 50.1", raw)
			return nil
		}
		if v < lo || v > hi {
			d.Errors[key] = fmt.Sprintf("%s mm is outside %g to %g mm; check the value and its units (mm)", raw, lo, hi)
			return nil
		}
		return &v
	}
	chk := halfmark.Check{ID: d.CheckID, Kind: halfmark.KindMorning, Device: d.Values["device"], Note: d.Values["note"]}
	if choice != nil {
		chk.MachineID, chk.BeamID = choice.MachineID, choice.BeamID
	}
	for _, j := range jaws {
		l := strings.ToLower(j)
		pos := number(l, j, true, -halfmark.MaxEdgePositionMM, halfmark.MaxEdgePositionMM)
		pen := number("pen_"+l, j+" penumbra", false, 0, halfmark.MaxPenumbraMM)
		light := number("light_"+l, j+" light field", false, -halfmark.MaxEdgePositionMM, halfmark.MaxEdgePositionMM)
		if pos != nil {
			chk.Edges = append(chk.Edges, halfmark.EdgeResult{Edge: j, PositionMM: *pos, PenumbraMM: pen, LightPositionMM: light})
		}
	}
	fx := number("field_x", "Field X", true, 0.1, halfmark.MaxFieldCM)
	fy := number("field_y", "Field Y", true, 0.1, halfmark.MaxFieldCM)
	chk.Setup = halfmark.Setup{FieldXcm: fx, FieldYcm: fy}
	chk.MeasuredAt = s.d.Now()
	if raw := d.Values["measured_at"]; raw != "" {
		t, err := time.ParseInLocation("2006-01-02T15:04", raw, time.Local)
		if err != nil {
			d.Errors["measured_at"] = "Give the date and time like 2026-03-02T07:45, or leave it empty for now."
		} else {
			chk.MeasuredAt = t
		}
	}
	if u := user(c); u != nil {
		chk.Operator = u.Email
	}
	if len(d.Errors) == 0 {
		stored, created, err := s.d.Checks.RecordCheck(ctx, user(c).Actor(), &chk)
		if err == nil {
			s.status.invalidate()
			rememberConsole(c, d.Selected, d.Values["device"])
			d.Verdict = s.verdictFor(ctx, stored, created, choice.Label)
			d.CheckID = uuid.NewString()
			keep := map[string]string{"device": d.Values["device"], "field_x": d.Values["field_x"], "field_y": d.Values["field_y"]}
			d.Values = keep
			d.Focus = "x1"
			return s.render(c, http.StatusOK, "entry", "Morning check", d)
		}
		he, ok := err.(*halfmark.Error)
		if !ok || he.Code != halfmark.EInvalid {
			return s.failErr(c, err)
		}
		for _, f := range he.Fields {
			key := f.Field
			if m := edgeIndex.FindStringSubmatch(f.Field); m != nil {
				i, _ := strconv.Atoi(m[1])
				if i < len(chk.Edges) {
					l := strings.ToLower(chk.Edges[i].Edge)
					switch m[2] {
					case "penumbra_mm":
						key = "pen_" + l
					case "light_position_mm":
						key = "light_" + l
					default:
						key = l
					}
				}
			}
			switch key {
			case "setup.field_x_cm":
				key = "field_x"
			case "setup.field_y_cm":
				key = "field_y"
			case "machine_id", "beam_id":
				key = "beam"
			}
			if _, known := d.Values[key]; known {
				d.Errors[key] = f.Message
			} else {
				d.Problem += f.String() + ". "
			}
		}
		if len(d.Errors) == 0 && d.Problem == "" {
			d.Problem = he.Message
		}
	}
	for _, k := range []string{"beam", "x1", "x2", "y1", "y2", "pen_x1", "pen_x2", "pen_y1", "pen_y2",
		"light_x1", "light_x2", "light_y1", "light_y2", "field_x", "field_y", "device", "measured_at"} {
		if d.Errors[k] != "" {
			d.Focus = k
			break
		}
	}
	return s.render(c, http.StatusUnprocessableEntity, "entry", "Morning check", d)
}

// verdictFor gives each edge its level: beyond the action limit (3),
// beyond tolerance (2), else within tolerance, using the local tolerance
// book for a morning check.
func (s *server) verdictFor(ctx context.Context, st halfmark.StoredCheck, created bool, label string) *verdict {
	v := &verdict{Beam: label, At: st.MeasuredAt, CheckID: st.ID, Created: created}
	for _, e := range st.Edges {
		r := verdictRow{Edge: e.Edge, ValueMM: e.IsoPositionMM, DeviationMM: e.DeviationMM, PenDevMM: e.PenumbraDeviationMM}
		if e.DeviationMM == nil && e.SeriesID != 0 {
			// No baseline was set: compare with the one estimated from
			// the series' first points, as the charts do.
			if dev, ok := s.estimatedDeviation(ctx, e.SeriesID, st.ID); ok {
				r.DeviationMM, r.Estimated = &dev, true
			}
		}
		r.Limits, r.HasLimits = s.d.Tolerances.Limits(halfmark.QPosition, halfmark.KindMorning, e.Edge, false)
		switch {
		case r.DeviationMM == nil:
			r.Text = "no baseline yet: this value helps establish it"
		case !r.HasLimits:
			r.Text = "no tolerance set for this edge in the tolerance file"
		case math.Abs(*r.DeviationMM) > r.Limits.ActionMM:
			r.Level, r.Text = halfmark.LevelImmediate, "beyond the action limit"
		case math.Abs(*r.DeviationMM) > r.Limits.ToleranceMM:
			r.Level, r.Text = halfmark.LevelScheduled, "beyond tolerance"
		default:
			r.Text = "within tolerance"
		}
		if r.Level > v.Worst {
			v.Worst = r.Level
		}
		v.Rows = append(v.Rows, r)
	}
	return v
}

// estimatedDeviation is a check's value minus the series' estimated
// baseline (the mean of the period's first points, spc.EstimateBaseline).
func (s *server) estimatedDeviation(ctx context.Context, seriesID int64, checkID string) (float64, bool) {
	ser, err := s.d.Series.Series(ctx, seriesID)
	if err != nil {
		return 0, false
	}
	pts, err := s.d.Series.Points(ctx, seriesID)
	if err != nil {
		return 0, false
	}
	ev, err := s.seriesEvaluation(ctx, seriesID)
	if err != nil {
		return 0, false
	}
	v := viewSeries(ser, pts, ev)
	if !v.HasCentre {
		return 0, false
	}
	for i := v.Start; i < len(pts); i++ {
		if pts[i].CheckID == checkID {
			return pts[i].Value - v.Centre, true
		}
	}
	return 0, false
}
