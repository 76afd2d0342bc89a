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
	// Warnings ask for confirmation before saving: values far from what
	// the beam's setup implies. Nothing is saved until confirmed.
	Warnings []string
	// Correcting is the check this entry corrects (supersedes); a reason
	// is then required.
	Correcting *halfmark.Check
}

// DefaultInstruction is shown beside a Level 2 or 3 morning verdict when
// the site sets none. It is a local choice, not a published requirement.
const DefaultInstruction = "Repeat the measurement and inform physics before treating."

type verdictRow struct {
	Edge        string
	ValueMM     float64
	DeviationMM *float64
	Limits      halfmark.Limits
	HasLimits   bool
	Level       halfmark.Level
	Text        string
	Pending     bool // the engine has not stored an evaluation of this check yet
	SeriesID    int64
}

type verdict struct {
	Machine, Beam string
	At            time.Time
	CheckID       string
	Created       bool
	Rows          []verdictRow
	Worst         halfmark.Level
	Pending       bool
	// Watched: some series of the check has been evaluated before, so a
	// worker is judging this machine and its verdict is worth a short wait.
	Watched bool
	// Instruction is shown large with a Level 2 or 3 verdict; Local says
	// it is the shipped text, a local choice.
	Instruction string
	Local       bool
	Corrects    string
}

// Big reports whether the verdict calls for action now (Level 2 or 3).
func (v *verdict) Big() bool { return v.Worst >= halfmark.LevelScheduled }

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
	if id := strings.TrimSpace(c.QueryParam("correct")); id != "" {
		if err := s.prefillCorrection(c, &d, id); err != nil {
			return s.failErr(c, err)
		}
	}
	return s.render(c, http.StatusOK, "entry", "Morning check", d)
}

// prefillCorrection fills the form with the values of the check being
// corrected, so that only the wrong ones need typing again.
func (s *server) prefillCorrection(c echo.Context, d *entryData, id string) error {
	if !halfmark.IsUUID(id) {
		return halfmark.Errorf(halfmark.ENotFound, "There is no check %q to correct.", id)
	}
	st, err := s.d.Checks.Check(c.Request().Context(), id)
	if err != nil {
		return err
	}
	if st.SupersededBy != "" {
		return halfmark.Errorf(halfmark.EConflict, "Check %s was already corrected by check %s; correct that one instead.", id, st.SupersededBy)
	}
	if st.Kind != halfmark.KindMorning {
		return halfmark.Errorf(halfmark.EInvalid, "Check %s is a %s check; only morning checks are corrected here.", id, st.Kind)
	}
	chk := st.Check
	d.Correcting = &chk
	d.Selected = fmt.Sprintf("%d:%d", st.MachineID, st.BeamID)
	d.Values["device"], d.Values["note"] = st.Device, ""
	d.Values["measured_at"] = st.MeasuredAt.Local().Format("2006-01-02T15:04")
	d.Values["supersedes"] = st.ID
	if st.Setup.FieldXcm != nil {
		d.Values["field_x"] = strconv.FormatFloat(*st.Setup.FieldXcm, 'f', -1, 64)
	}
	if st.Setup.FieldYcm != nil {
		d.Values["field_y"] = strconv.FormatFloat(*st.Setup.FieldYcm, 'f', -1, 64)
	}
	for _, e := range st.Edges {
		l := strings.ToLower(e.Edge)
		d.Values[l] = strconv.FormatFloat(e.PositionMM, 'f', -1, 64)
		if e.PenumbraMM != nil {
			d.Values["pen_"+l] = strconv.FormatFloat(*e.PenumbraMM, 'f', -1, 64)
		}
		if e.LightPositionMM != nil {
			d.Values["light_"+l] = strconv.FormatFloat(*e.LightPositionMM, 'f', -1, 64)
		}
	}
	d.Focus = "reason"
	return nil
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
	for _, k := range []string{"beam", "device", "field_x", "field_y", "measured_at", "note", "check_id", "supersedes", "reason"} {
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
	if id := d.Values["supersedes"]; id != "" {
		if err := s.prefillCorrection(c, &entryData{Values: map[string]string{}}, id); err != nil {
			d.Problem = messageOf(err)
		} else if old, err := s.d.Checks.Check(ctx, id); err == nil {
			o := old.Check
			d.Correcting = &o
			chk.Supersedes = id
			if d.Values["reason"] == "" {
				d.Errors["reason"] = "Say why the check is corrected (e.g. typed in cm): the reason is kept with the correction."
			} else {
				chk.Note = strings.TrimSpace("Correction of " + id + ": " + d.Values["reason"] + ". " + d.Values["note"])
			}
		}
	}
	if len(d.Errors) == 0 && d.Problem == "" && c.FormValue("confirm") != "1" {
		if d.Warnings = plausibility(chk, fx, fy); len(d.Warnings) > 0 {
			d.Focus = "confirm"
			return s.render(c, http.StatusOK, "entry", "Morning check", d)
		}
	}
	if len(d.Errors) == 0 && d.Problem == "" {
		stored, created, err := s.d.Checks.RecordCheck(ctx, user(c).Actor(), &chk)
		if err == nil {
			s.status.invalidate()
			rememberConsole(c, d.Selected, d.Values["device"])
			d.Verdict = s.verdictFor(ctx, stored, created, choice.Label)
			// The worker evaluates a stored check's machine at once (the
			// store announces it); wait briefly for that judgement rather
			// than show "pending" — never judge here.
			for wait := 0; d.Verdict.Pending && d.Verdict.Watched && created && wait < verdictWaitSteps; wait++ {
				select {
				case <-ctx.Done():
				case <-time.After(verdictWaitStep):
				}
				d.Verdict = s.verdictFor(ctx, stored, created, choice.Label)
			}
			d.CheckID = uuid.NewString()
			keep := map[string]string{"device": d.Values["device"], "field_x": d.Values["field_x"], "field_y": d.Values["field_y"]}
			d.Values = keep
			d.Correcting = nil
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
		"light_x1", "light_x2", "light_y1", "light_y2", "field_x", "field_y", "device", "measured_at", "reason"} {
		if d.Errors[k] != "" {
			d.Focus = k
			break
		}
	}
	return s.render(c, http.StatusUnprocessableEntity, "entry", "Morning check", d)
}

// nominalSpanMM is how far a typed jaw position may lie from the nominal
// half-field before the entry asks for confirmation (mm). A local choice:
// ten times the TG-142 daily 1 mm jaw tolerance, far beyond any drift.
const nominalSpanMM = 10.0

// plausibility names each jaw position far from what the beam's setup
// implies: more than nominalSpanMM from the nominal half-field (field size
// in cm × 10 / 2 mm), and says when the value looks typed in cm (ten times
// it lies near the nominal half-field).
func plausibility(chk halfmark.Check, fx, fy *float64) []string {
	var out []string
	cm := 0
	for _, e := range chk.Edges {
		f := fx
		if strings.HasPrefix(e.Edge, "Y") {
			f = fy
		}
		if f == nil {
			continue
		}
		nominal := *f * 10 / 2
		v := e.PositionMM
		if math.Abs(v-nominal) <= nominalSpanMM {
			continue
		}
		w := fmt.Sprintf("%s = %s mm is %s mm from the nominal half-field of %s mm (a %s cm field).", e.Edge, trimFloat(v),
			trimFloat(math.Abs(v-nominal)), trimFloat(nominal), trimFloat(*f))
		if math.Abs(v*10-nominal) <= nominalSpanMM {
			w += fmt.Sprintf(" It looks typed in cm: %s cm is %s mm.", trimFloat(v), trimFloat(v*10))
			cm++
		}
		out = append(out, w)
	}
	if cm > 1 {
		out = append(out, fmt.Sprintf("%d values look typed in cm; positions are entered in mm.", cm))
	}
	return out
}

// The morning verdict waits up to verdictWaitSteps × verdictWaitStep (2 s)
// for the drift engine's evaluation of a just-stored check.
const (
	verdictWaitStep  = 50 * time.Millisecond
	verdictWaitSteps = 40
)

// verdictFor shows, for each edge, the drift engine's stored evaluation of
// its series when that evaluation includes this check; otherwise the edge
// is "evaluation pending". The dashboard judges nothing itself.
func (s *server) verdictFor(ctx context.Context, st halfmark.StoredCheck, created bool, label string) *verdict {
	v := &verdict{Beam: label, At: st.MeasuredAt, CheckID: st.ID, Created: created, Corrects: st.Supersedes,
		Instruction: s.d.Instruction, Local: s.d.Instruction == ""}
	if v.Local {
		v.Instruction = DefaultInstruction
	}
	for _, e := range st.Edges {
		r := verdictRow{Edge: e.Edge, ValueMM: e.IsoPositionMM, SeriesID: e.SeriesID, Pending: true, Text: "evaluation pending"}
		if s.d.Evaluations != nil && e.SeriesID != 0 {
			ev, err := s.d.Evaluations.SeriesEvaluation(ctx, e.SeriesID)
			if err == nil {
				v.Watched = true
			}
			if err == nil && evaluatedCheck(ev, st.ID) {
				r.Pending, r.Level, r.DeviationMM = false, ev.Level, ev.DeviationMM
				r.Text = engineVerdictText(ev.Verdict, ev.Level)
				if ev.Rule != "" && ev.Verdict == halfmark.VerdictSignal {
					r.Text = plainNumbers(ev.Rule) // the badge beside it names the level
				}
				if ev.Limits != nil {
					r.Limits, r.HasLimits = *ev.Limits, true
				}
			} else if err != nil && halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
				s.d.Log.Warn("morning verdict", "series", e.SeriesID, "err", err)
			}
		}
		if r.Pending {
			v.Pending = true
		}
		v.Worst = max(v.Worst, r.Level)
		v.Rows = append(v.Rows, r)
	}
	return v
}

// evaluatedCheck reports whether a stored evaluation has judged the check:
// its chart's newest point is that check.
func evaluatedCheck(ev halfmark.SeriesEvaluation, checkID string) bool {
	for i := len(ev.Chart.Points) - 1; i >= 0; i-- {
		if ev.Chart.Points[i].CheckID == checkID {
			return true
		}
	}
	return false
}

// correctedPoints are a series' values that later checks superseded, to be
// drawn beside their corrections (engineView.Corrected).
func (s *server) correctedPoints(ctx context.Context, ser halfmark.Series) ([]correctedPoint, error) {
	cs, err := s.d.Checks.Checks(ctx, halfmark.CheckFilter{MachineID: ser.MachineID, BeamID: ser.BeamID, Limit: 100000})
	if err != nil {
		return nil, err
	}
	var out []correctedPoint
	for _, c := range cs {
		if c.SupersededBy == "" || c.Setup.Geometry() != ser.Geometry {
			continue
		}
		for _, e := range c.Edges {
			if e.Edge != ser.Edge {
				continue
			}
			switch {
			case ser.Quantity == halfmark.QPosition:
				out = append(out, correctedPoint{c.MeasuredAt, e.IsoPositionMM})
			case ser.Quantity == halfmark.QPenumbra && e.PenumbraMM != nil:
				out = append(out, correctedPoint{c.MeasuredAt, *e.PenumbraMM})
			case ser.Quantity == halfmark.QLightOffset && e.IsoLightPositionMM != nil:
				out = append(out, correctedPoint{c.MeasuredAt, *e.IsoLightPositionMM - e.IsoPositionMM})
			}
		}
	}
	return out, nil
}
