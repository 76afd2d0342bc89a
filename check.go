package halfmark

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// CheckKind says why a check was measured.
type CheckKind string

// The check kinds.
const (
	KindMorning       CheckKind = "morning"
	KindMonthly       CheckKind = "monthly"
	KindAnnual        CheckKind = "annual"
	KindCommissioning CheckKind = "commissioning"
	KindPostService   CheckKind = "post-service"
)

// CheckKinds lists the kinds in display order.
var CheckKinds = []CheckKind{KindMorning, KindMonthly, KindAnnual, KindCommissioning, KindPostService}

// Valid reports whether k is a known kind.
func (k CheckKind) Valid() bool {
	for _, v := range CheckKinds {
		if k == v {
			return true
		}
	}
	return false
}

// Input limits: values outside them are refused as implausible.
const (
	MaxPenumbraMM     = 30.0  // 80–20 penumbra, mm
	MaxEdgePositionMM = 300.0 // |edge position|, mm
	MaxFieldCM        = 40.0  // nominal field side, cm
	MinSSDcm          = 50.0  // source-to-surface distance, cm
	MaxSSDcm          = 200.0
	MaxDepthCm        = 40.0 // depth in water, cm
	MaxEdgesPerCheck  = 500
	FutureSkew        = 5 * time.Minute // allowed clock skew for measured_at
)

// Setup is the measurement geometry of a check. A nil field was not given.
type Setup struct {
	SSDcm         *float64 `json:"ssd_cm,omitempty"`         // source-to-surface distance, cm
	DepthCm       *float64 `json:"depth_cm,omitempty"`       // depth of the measurement plane below the surface, cm
	FieldXcm      *float64 `json:"field_x_cm,omitempty"`     // nominal field size X at the isocentre, cm
	FieldYcm      *float64 `json:"field_y_cm,omitempty"`     // nominal field size Y at the isocentre, cm
	CollimatorDeg *float64 `json:"collimator_deg,omitempty"` // IEC 61217 collimator angle, degrees
	GantryDeg     *float64 `json:"gantry_deg,omitempty"`     // IEC 61217 gantry angle, degrees
}

// AtIsocentre reports whether positions are already in the isocentre plane
// (no SSD and no depth given).
func (s Setup) AtIsocentre() bool { return s.SSDcm == nil && s.DepthCm == nil }

// Geometry is the series key part of a setup: nominal field, where it was
// measured and the angles, e.g. "10×10 cm, iso" or
// "20×20 cm, SSD 90 d 10, G 90". Positions are compared in the isocentre
// plane, but penumbra depends on SSD and depth, so both belong to the key.
func (s Setup) Geometry() string {
	var b strings.Builder
	b.WriteString(num(s.FieldXcm, "?") + "×" + num(s.FieldYcm, "?") + " cm")
	if s.AtIsocentre() {
		b.WriteString(", iso")
	} else {
		b.WriteString(", SSD " + num(s.SSDcm, "?") + " d " + num(s.DepthCm, "0"))
	}
	if s.GantryDeg != nil && *s.GantryDeg != 0 {
		b.WriteString(", G " + num(s.GantryDeg, ""))
	}
	if s.CollimatorDeg != nil && *s.CollimatorDeg != 0 {
		b.WriteString(", C " + num(s.CollimatorDeg, ""))
	}
	return b.String()
}

// EdgeResult is one edge of a check. PositionMM is as measured in the
// measurement plane; IsoPositionMM is projected to the isocentre plane by
// SAD/(SSD + depth).
type EdgeResult struct {
	Edge               string   `json:"edge"`
	PositionMM         float64  `json:"position_mm"`
	PenumbraMM         *float64 `json:"penumbra_mm,omitempty"`           // 80–20 width, mm, in the measurement plane
	LightPositionMM    *float64 `json:"light_position_mm,omitempty"`     // light-field edge, same convention, mm
	IsoPositionMM      float64  `json:"iso_position_mm"`                 // set by Normalise
	IsoLightPositionMM *float64 `json:"iso_light_position_mm,omitempty"` // set by Normalise
}

// Check is one measurement session on one beam. Checks are never changed:
// a correction is a new check whose Supersedes names the old one.
type Check struct {
	ID              string       `json:"id"` // UUID, may be chosen by the client
	MachineID       int64        `json:"machine_id"`
	BeamID          int64        `json:"beam_id"`
	Kind            CheckKind    `json:"kind"`
	MeasuredAt      time.Time    `json:"measured_at"`
	Device          string       `json:"device,omitempty"`   // detector, e.g. "EPID", "diode array", "film"
	Method          Method       `json:"method,omitempty"`   // how the values were measured; empty: inferred (InferMethod)
	Operator        string       `json:"operator,omitempty"` // who measured
	Note            string       `json:"note,omitempty"`
	Setup           Setup        `json:"setup"`
	Edges           []EdgeResult `json:"edges"`
	Supersedes      string       `json:"supersedes,omitempty"` // id of the check this one corrects
	SupersededBy    string       `json:"superseded_by,omitempty"`
	AnalysisVersion string       `json:"analysis_version,omitempty"` // set when edges were computed from raw data
	CreatedAt       time.Time    `json:"created_at"`
	CreatedBy       string       `json:"created_by"`
}

// Validate checks everything that can be checked without the store and
// fills IsoPositionMM. prefix is prepended to field names ("checks[3].").
// sadCm is the machine's SAD (pass 0 when the machine is unknown; the
// projection is then left to a second call).
func (c *Check) Validate(prefix string, now time.Time) Fields {
	var f Fields
	if c.ID != "" && !IsUUID(c.ID) {
		f.Add(prefix+"id", "must be a UUID such as 0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60 (got %q)", c.ID)
	}
	if c.Supersedes != "" && !IsUUID(c.Supersedes) {
		f.Add(prefix+"supersedes", "must be the UUID of the check being corrected (got %q)", c.Supersedes)
	}
	if c.MachineID <= 0 {
		f.Add(prefix+"machine_id", "is required: the id of a machine (see GET /api/v1/machines)")
	}
	if c.BeamID <= 0 {
		f.Add(prefix+"beam_id", "is required: the id of one of the machine's beams")
	}
	if !c.Kind.Valid() {
		f.Add(prefix+"kind", "must be one of morning, monthly, annual, commissioning, post-service (got %q)", c.Kind)
	}
	switch {
	case c.MeasuredAt.IsZero():
		f.Add(prefix+"measured_at", "is required (RFC 3339 time, e.g. 2026-03-02T07:45:00+01:00)")
	case c.MeasuredAt.After(now.Add(FutureSkew)):
		f.Add(prefix+"measured_at", "%s is in the future; check the clock or the date typed", c.MeasuredAt.Format(time.RFC3339))
	case c.MeasuredAt.Year() < 1990:
		f.Add(prefix+"measured_at", "%s is before 1990; check the date typed", c.MeasuredAt.Format(time.RFC3339))
	}
	checkText(&f, prefix+"device", c.Device, 0, 200)
	checkText(&f, prefix+"operator", c.Operator, 0, 200)
	checkText(&f, prefix+"note", c.Note, 0, 4000)
	c.Setup.validate(&f, prefix+"setup.")
	if len(c.Edges) == 0 {
		f.Add(prefix+"edges", "at least one edge result is required")
	}
	if len(c.Edges) > MaxEdgesPerCheck {
		f.Add(prefix+"edges", "has %d results; at most %d per check", len(c.Edges), MaxEdgesPerCheck)
		return f
	}
	seen := make(map[string]bool, len(c.Edges))
	for i := range c.Edges {
		e := &c.Edges[i]
		p := fmt.Sprintf("%sedges[%d].", prefix, i)
		id, err := ParseEdge(e.Edge)
		if err != nil {
			f.Add(p+"edge", "%s", err.Error())
		} else {
			e.Edge = id.String()
			if seen[e.Edge] {
				f.Add(p+"edge", "%s appears twice in this check; send each edge once", e.Edge)
			}
			seen[e.Edge] = true
		}
		checkPosition(&f, p+"position_mm", e.PositionMM)
		if e.LightPositionMM != nil {
			checkPosition(&f, p+"light_position_mm", *e.LightPositionMM)
		}
		if e.PenumbraMM != nil {
			v := *e.PenumbraMM
			switch {
			case !finite(v):
				f.Add(p+"penumbra_mm", "must be a finite number")
			case v < 0:
				f.Add(p+"penumbra_mm", "is negative (%v mm); an 80–20 penumbra is a width and cannot be negative", v)
			case v > MaxPenumbraMM:
				f.Add(p+"penumbra_mm", "%v mm is over %v mm, which no photon field edge has; check the units (mm)", v, MaxPenumbraMM)
			}
		}
	}
	return f
}

func checkPosition(f *Fields, field string, v float64) {
	switch {
	case !finite(v):
		f.Add(field, "must be a finite number")
	case math.Abs(v) > MaxEdgePositionMM:
		f.Add(field, "%v mm is beyond ±%v mm from the axis; positions are in mm from the central axis", v, MaxEdgePositionMM)
	}
}

func (s Setup) validate(f *Fields, p string) {
	if s.SSDcm != nil {
		if v := *s.SSDcm; !finite(v) || v < MinSSDcm || v > MaxSSDcm {
			f.Add(p+"ssd_cm", "%v cm is outside the plausible range %v–%v cm", v, MinSSDcm, MaxSSDcm)
		}
	}
	if s.DepthCm != nil {
		if v := *s.DepthCm; !finite(v) || v < 0 || v > MaxDepthCm {
			f.Add(p+"depth_cm", "%v cm is outside the plausible range 0–%v cm", v, MaxDepthCm)
		}
	}
	if s.DepthCm != nil && s.SSDcm == nil {
		f.Add(p+"ssd_cm", "is required when depth_cm is given, to project positions to the isocentre plane")
	}
	for _, fv := range []struct {
		name string
		v    *float64
	}{{"field_x_cm", s.FieldXcm}, {"field_y_cm", s.FieldYcm}} {
		if fv.v != nil {
			if v := *fv.v; !finite(v) || v <= 0 || v > MaxFieldCM {
				f.Add(p+fv.name, "%v cm is outside 0–%v cm; nominal field sides are in cm", v, MaxFieldCM)
			}
		}
	}
	for _, a := range []struct {
		name string
		v    *float64
	}{{"collimator_deg", s.CollimatorDeg}, {"gantry_deg", s.GantryDeg}} {
		if a.v != nil {
			if v := *a.v; !finite(v) || v < 0 || v >= 360 {
				f.Add(p+a.name, "%v° is outside 0–360°; use IEC 61217 angles", v)
			}
		}
	}
}

// Project sets each edge's isocentre-plane position from its measured one
// with project(x, SAD, SSD, depth) — x·SAD/(SSD + depth) (magnification,
// common practice; analysis.ProjectToIsocentre). A setup at the isocentre
// projects with SSD = SAD, depth 0.
func (c *Check) Project(sadCm float64, project func(x, sadCm, ssdCm, depthCm float64) (float64, error)) error {
	ssd, depth := sadCm, 0.0
	if !c.Setup.AtIsocentre() {
		ssd, depth = deref(c.Setup.SSDcm, sadCm), deref(c.Setup.DepthCm, 0)
	}
	for i := range c.Edges {
		e := &c.Edges[i]
		v, err := project(e.PositionMM, sadCm, ssd, depth)
		if err != nil {
			return err
		}
		e.IsoPositionMM = v
		if e.LightPositionMM != nil {
			v, err := project(*e.LightPositionMM, sadCm, ssd, depth)
			if err != nil {
				return err
			}
			e.IsoLightPositionMM = &v
		}
	}
	return nil
}

// BodyHash is a fingerprint of what the client sent (not the derived
// fields), used to tell an idempotent replay from a conflicting one: the
// SHA-256 of every sent field in a fixed binary layout (lengths before
// strings, a presence byte before each optional number).
func (c *Check) BodyHash() string {
	h := sha256.New()
	var buf [8]byte
	i64 := func(v int64) {
		binary.LittleEndian.PutUint64(buf[:], uint64(v))
		h.Write(buf[:])
	}
	f64 := func(v float64) { i64(int64(math.Float64bits(v))) }
	str := func(s string) {
		i64(int64(len(s)))
		h.Write([]byte(s))
	}
	opt := func(p *float64) {
		if p == nil {
			h.Write([]byte{0})
			return
		}
		h.Write([]byte{1})
		f64(*p)
	}
	i64(c.MachineID)
	i64(c.BeamID)
	str(string(c.Kind))
	i64(c.MeasuredAt.UnixNano())
	str(c.Device)
	str(c.Operator)
	str(c.Note)
	str(c.Supersedes)
	for _, p := range []*float64{c.Setup.SSDcm, c.Setup.DepthCm, c.Setup.FieldXcm, c.Setup.FieldYcm, c.Setup.CollimatorDeg, c.Setup.GantryDeg} {
		opt(p)
	}
	i64(int64(len(c.Edges)))
	for _, e := range c.Edges {
		str(e.Edge)
		f64(e.PositionMM)
		opt(e.PenumbraMM)
		opt(e.LightPositionMM)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// IsUUID reports whether s has the 8-4-4-4-12 hexadecimal UUID form.
func IsUUID(s string) bool {
	if len(s) != 36 {
		return false
	}
	for i := 0; i < 36; i++ {
		c := s[i]
		switch i {
		case 8, 13, 18, 23:
			if c != '-' {
				return false
			}
		default:
			if !(c >= '0' && c <= '9' || c >= 'a' && c <= 'f' || c >= 'A' && c <= 'F') {
				return false
			}
		}
	}
	return true
}

func deref(p *float64, def float64) float64 {
	if p == nil {
		return def
	}
	return *p
}

func num(p *float64, def string) string {
	if p == nil {
		return def
	}
	return strconv.FormatFloat(*p, 'f', -1, 64)
}

// EdgeOutcome is the stored view of one edge after ingest: its isocentre
// position and, when a baseline exists, its deviation from it.
type EdgeOutcome struct {
	EdgeResult
	DeviationMM         *float64 `json:"deviation_mm"`          // iso position − position baseline, mm; null without baseline
	BaselineMM          *float64 `json:"baseline_mm"`           // the position baseline in force
	PenumbraDeviationMM *float64 `json:"penumbra_deviation_mm"` // penumbra − penumbra baseline, mm
	SeriesID            int64    `json:"series_id"`             // the position series of this edge
}

// StoredCheck is what the API answers for a stored check.
type StoredCheck struct {
	Check
	Edges []EdgeOutcome `json:"edges"`
}

// CheckFilter selects checks for listing.
type CheckFilter struct {
	MachineID int64
	BeamID    int64
	Kind      CheckKind
	From, To  time.Time
	Limit     int
}

// BatchResult reports a batch ingest.
type BatchResult struct {
	IDs      []string `json:"ids"`      // in request order
	Created  int      `json:"created"`  // new checks stored
	Existing int      `json:"existing"` // idempotent replays
}

// CheckService records and reads checks.
type CheckService interface {
	// RecordCheck validates and stores one check with its edge results in
	// one transaction with its audit row. A replay of the same ID with the
	// same body returns the stored check and created=false; a replay with a
	// different body is EConflict. Unknown machine/beam and bad values are
	// EInvalid with field errors; nothing is written on any error.
	RecordCheck(ctx context.Context, a Actor, c *Check) (stored StoredCheck, created bool, err error)
	// RecordCheckWithRaw stores a check computed from raw data together
	// with that raw data, in one transaction.
	RecordCheckWithRaw(ctx context.Context, a Actor, c *Check, r *RawData) (stored StoredCheck, created bool, err error)
	// RecordBatch stores all checks or none.
	RecordBatch(ctx context.Context, a Actor, cs []Check) (BatchResult, error)
	// Check returns one check with its outcomes; ENotFound when absent.
	Check(ctx context.Context, id string) (StoredCheck, error)
	// Checks lists checks newest first.
	Checks(ctx context.Context, f CheckFilter) ([]Check, error)
}
