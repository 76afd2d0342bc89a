package halfmark

import (
	"context"
	"fmt"
	"strings"
	"time"
)

// Method is how a check's values were measured. Values measured by
// different methods carry different systematic offsets (a light-field
// readout is not a water-tank scan), so each method has its own series and
// baseline.
type Method string

// The measurement methods.
const (
	MethodTyped Method = "typed" // read off the console or the light field and typed in
	MethodEPID  Method = "epid"  // electronic portal imaging device
	MethodScan  Method = "scan"  // water-tank scan or detector array
	MethodFilm  Method = "film"  // radiochromic film
	MethodOther Method = "other" // any other detector, named in the check's device field
)

// Methods lists the methods in display order.
var Methods = []Method{MethodTyped, MethodEPID, MethodScan, MethodFilm, MethodOther}

// Valid reports whether m is a known method.
func (m Method) Valid() bool {
	for _, v := range Methods {
		if m == v {
			return true
		}
	}
	return false
}

// ComponentKind is the physical part of a machine that a series sees.
type ComponentKind string

// The component kinds.
const (
	ComponentJaw        ComponentKind = "jaw"         // one collimator jaw: X1, X2, Y1 or Y2, in every beam and setup
	ComponentMLCBank    ComponentKind = "mlc_bank"    // one MLC bank: the mean of all its leaf ends in an image
	ComponentMLCLeaf    ComponentKind = "mlc_leaf"    // one leaf end, judged on its residual after its bank's mean
	ComponentPenumbra   ComponentKind = "penumbra"    // one beam's 80–20 penumbra at every edge
	ComponentLightField ComponentKind = "light_field" // one jaw's light/radiation offset
)

// ComponentKinds lists the component kinds in display order.
var ComponentKinds = []ComponentKind{ComponentJaw, ComponentMLCBank, ComponentMLCLeaf, ComponentPenumbra, ComponentLightField}

// Component names one physical part of a machine: a jaw ("Y2"), an MLC
// bank ("bank 2"), a leaf end ("B2P29"), a beam's penumbra (the beam's
// label, "6 MV FFF") or a jaw's light field ("X1").
type Component struct {
	Kind ComponentKind `json:"component_kind"`
	Name string        `json:"component"`
}

// Label names a component as a physicist says it: "jaw Y2", "MLC bank 2",
// "leaf B2P29", "penumbra of 6 MV FFF", "light field X1".
func (c Component) Label() string {
	switch c.Kind {
	case ComponentJaw:
		return "jaw " + c.Name
	case ComponentMLCBank:
		return "MLC " + c.Name
	case ComponentMLCLeaf:
		return "leaf " + c.Name
	case ComponentPenumbra:
		return "penumbra of " + c.Name
	case ComponentLightField:
		return "light field " + c.Name
	}
	return strings.TrimSpace(string(c.Kind) + " " + c.Name)
}

// String is "jaw Y2", "mlc_bank bank 2", …
func (c Component) String() string { return string(c.Kind) + " " + c.Name }

// ComponentsOf lists the components a series of the given quantity and
// edge on the named beam contributes to: a jaw position series feeds its
// jaw; an MLC leaf position series feeds its bank and its own leaf; a
// penumbra series feeds its beam's penumbra; a light offset feeds its
// jaw's light field (leaf light offsets feed nothing).
func ComponentsOf(q Quantity, edge, beamLabel string) []Component {
	e, err := ParseEdge(edge)
	if err != nil {
		return nil
	}
	switch q {
	case QPosition:
		if e.Jaw != "" {
			return []Component{{ComponentJaw, e.Jaw}}
		}
		return []Component{{ComponentMLCBank, fmt.Sprintf("bank %d", e.Bank)}, {ComponentMLCLeaf, e.String()}}
	case QPenumbra:
		return []Component{{ComponentPenumbra, beamLabel}}
	case QLightOffset:
		if e.Jaw != "" {
			return []Component{{ComponentLightField, e.Jaw}}
		}
	}
	return nil
}

// FindingState is where a finding is in its lifecycle.
type FindingState string

// Finding states: open → acknowledged → resolved.
const (
	FindingOpen         FindingState = "open"
	FindingAcknowledged FindingState = "acknowledged"
	FindingResolved     FindingState = "resolved"
)

// Crossing statuses of a finding: when the component's trend reaches its
// tolerance.
const (
	CrossingAlreadyBeyond  = "already_beyond"  // the component is beyond its tolerance now
	CrossingProjected      = "projected"       // a significant trend reaches the tolerance within the horizon
	CrossingNotSignificant = "not_significant" // no significant trend since the onset
	CrossingBeyondHorizon  = "beyond_horizon"  // significant, but later than the horizon
)

// FindingCrossing says when the trend since the onset reaches the limits.
// Dates are set only for status "projected" (ToleranceDate; ActionDate when
// the action limit is also reached within the horizon).
type FindingCrossing struct {
	Status        string     `json:"status"`
	ToleranceDate *time.Time `json:"tolerance_date"`
	ActionDate    *time.Time `json:"action_date"`
	// ToleranceInterval is the 95% interval of ToleranceDate (nil bounds:
	// open-ended), from the slope's interval.
	ToleranceInterval [2]*time.Time `json:"tolerance_interval,omitempty"`
}

// Evidence is one series behind a finding and the rules that fired on it.
type Evidence struct {
	SeriesID int64    `json:"series_id"`
	Beam     string   `json:"beam"`
	Geometry string   `json:"geometry"`
	Method   Method   `json:"method"`
	Edge     string   `json:"edge"`
	Quantity Quantity `json:"quantity"`
	// Rules are families: limit, shewhart, cusum, ewma, nelson, trend.
	Rules       []string `json:"rules"`
	Level       Level    `json:"level"`
	DeviationMM *float64 `json:"deviation_mm"`
}

// Finding is one physical fault of one component of one machine, with the
// evidence of every series that sees it. There is at most one active
// finding per (machine, component, direction of change).
type Finding struct {
	ID        int64  `json:"id"`
	MachineID int64  `json:"machine_id"`
	Machine   string `json:"machine"`
	Component
	Direction int          `json:"direction"` // +1 outward / wider, −1 inward / narrower
	Level     Level        `json:"level"`
	State     FindingState `json:"state"`
	// MagnitudeMM is the component's change, signed by the edge convention
	// (positive = outward or wider), with its 95% interval.
	MagnitudeMM   float64    `json:"magnitude_mm"`
	MagnitudeCIMM [2]float64 `json:"magnitude_ci_mm"`
	Onset         *time.Time `json:"onset"`
	// Limits are the component's own tolerance and action limit, the ones
	// its level was judged against (nil: the book sets none).
	Limits   *Limits         `json:"limits,omitempty"`
	Crossing FindingCrossing `json:"crossing"`
	Evidence []Evidence      `json:"evidence"`
	Message  string          `json:"message"`
	// Cause is set for penumbra findings: what the change is consistent
	// with (a larger source, a radiological change, one setup).
	Cause *PenumbraCause `json:"cause,omitempty"`

	OpenedAt       time.Time  `json:"opened_at"`
	UpdatedAt      time.Time  `json:"updated_at"`
	AckBy          string     `json:"acknowledged_by,omitempty"`
	AckAt          *time.Time `json:"acknowledged_at,omitempty"`
	AckComment     string     `json:"acknowledge_comment,omitempty"`
	ResolvedBy     string     `json:"resolved_by,omitempty"`
	ResolvedAt     *time.Time `json:"resolved_at,omitempty"`
	ResolveComment string     `json:"resolve_comment,omitempty"`
}

// PenumbraCause is the likely cause of a penumbra change: "source",
// "radiological", "setup" or "undetermined".
type PenumbraCause struct {
	Kind                 string  `json:"kind"`
	SourceSigmaChangeMM  float64 `json:"source_sigma_change_mm"`
	RadiologicalChangeMM float64 `json:"radiological_change_mm"`
	ExplainedFraction    float64 `json:"explained_fraction"`
}

// Active reports whether the finding is open or acknowledged.
func (f *Finding) Active() bool { return f.State != FindingResolved }

// FindingFilter selects findings.
type FindingFilter struct {
	MachineID int64
	// State: "active" (open or acknowledged; the default), "open",
	// "acknowledged", "resolved" or "all".
	State string
	// ActiveDuring, when both are set, keeps findings active at any time
	// in [From, To): opened before To and not resolved before From.
	From, To time.Time
	Limit    int
}

// ParseFindingState checks a state filter; "" means active.
func ParseFindingState(s string) (string, error) {
	switch s = strings.TrimSpace(s); s {
	case "":
		return "active", nil
	case "active", "open", "acknowledged", "resolved", "all":
		return s, nil
	}
	return "", fmt.Errorf("state must be active, open, acknowledged, resolved or all (got %q)", s)
}

// FindingService reads findings and moves them through their lifecycle.
// The drift engine alone decides their level; this service never computes.
type FindingService interface {
	// Findings lists findings, most urgent (level, then newest) first.
	Findings(ctx context.Context, f FindingFilter) ([]Finding, error)
	// Finding returns one finding; ENotFound when absent.
	Finding(ctx context.Context, id int64) (Finding, error)
	// AcknowledgeFinding marks an open finding (and its evidence alerts)
	// as seen; EConflict when it is not open.
	AcknowledgeFinding(ctx context.Context, a Actor, id int64, comment string) (Finding, error)
	// ResolveFinding closes a finding by hand; a comment is required.
	ResolveFinding(ctx context.Context, a Actor, id int64, comment string) (Finding, error)
}

// InferMethod is the method a check was most likely measured with when it
// does not say: from its raw data (an EPID image or picket fence → epid, a
// profile → scan), else from words in its device ("EPID" or "portal" →
// epid, "film" → film, a tank, array, chamber or diode → scan), else typed.
func InferMethod(device string, raw RawKind) Method {
	switch raw {
	case RawImage, RawPicket:
		return MethodEPID
	case RawProfile:
		return MethodScan
	}
	d := strings.ToLower(device)
	has := func(words ...string) bool {
		for _, w := range words {
			if strings.Contains(d, w) {
				return true
			}
		}
		return false
	}
	switch {
	case has("epid", "portal"):
		return MethodEPID
	case has("film"):
		return MethodFilm
	case has("tank", "scan", "array", "chamber", "diode"):
		return MethodScan
	}
	return MethodTyped
}

// SetMethods fills the method of every check that has none (InferMethod
// with the raw kind, "" when there is no raw data) and refuses an unknown
// one, naming the field ("checks[3].method" for batch prefix "checks").
func SetMethods(cs []Check, raw RawKind, prefix string) error {
	var f Fields
	for i := range cs {
		c := &cs[i]
		switch {
		case c.Method == "":
			c.Method = InferMethod(c.Device, raw)
		case !c.Method.Valid():
			p := ""
			if prefix != "" {
				p = fmt.Sprintf("%s[%d].", prefix, i)
			}
			f.Add(p+"method", "must be one of typed, epid, scan, film, other (got %q)", c.Method)
		}
	}
	return f.Err("the check is not valid; nothing was stored")
}
