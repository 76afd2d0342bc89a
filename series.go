package halfmark

import (
	"context"
	"time"
)

// Quantity is the metric a series follows.
type Quantity string

// The quantities recorded for each edge.
const (
	QPosition    Quantity = "position"     // isocentre-plane 50% position, mm
	QPenumbra    Quantity = "penumbra"     // 80–20 penumbra in the measurement plane, mm
	QLightOffset Quantity = "light_offset" // light-field edge − radiation edge (isocentre plane), mm
)

// Valid reports whether q is a known quantity.
func (q Quantity) Valid() bool { return q == QPosition || q == QPenumbra || q == QLightOffset }

// Series is one (machine, beam, setup geometry, edge, quantity) sequence.
type Series struct {
	ID        int64      `json:"id"`
	MachineID int64      `json:"machine_id"`
	BeamID    int64      `json:"beam_id"`
	Geometry  string     `json:"geometry"`
	Edge      string     `json:"edge"`
	Quantity  Quantity   `json:"quantity"`
	Method    Method     `json:"method"` // each measurement method has its own series and baseline
	Points    int        `json:"points"` // number of current (not superseded) points
	LastAt    *time.Time `json:"last_at,omitempty"`
	Baseline  *Baseline  `json:"baseline,omitempty"` // the baseline in force now
}

// SeriesKey identifies a series by its parts.
type SeriesKey struct {
	MachineID int64
	BeamID    int64
	Geometry  string
	Edge      string
	Quantity  Quantity
	Method    Method
}

// Point is one current value of a series.
type Point struct {
	CheckID    string    `json:"check_id"`
	MeasuredAt time.Time `json:"measured_at"`
	Value      float64   `json:"value"` // mm
	Kind       CheckKind `json:"kind"`
	Device     string    `json:"device,omitempty"`
	Operator   string    `json:"operator,omitempty"`
}

// BaselineSource says how a baseline was set.
type BaselineSource string

// Baseline sources.
const (
	BaselineSet       BaselineSource = "set"       // set by a physicist (commissioning value)
	BaselineEstimated BaselineSource = "estimated" // established from the first N points of a period
	BaselineService   BaselineSource = "service"   // a new period started after a service event
)

// Baseline is one version of a series' reference value. A new version
// never changes an old one; the one in force at time t is the newest
// version with ValidFrom ≤ t.
type Baseline struct {
	ID        int64          `json:"id"`
	SeriesID  int64          `json:"series_id"`
	Version   int            `json:"version"`
	ValueMM   *float64       `json:"value_mm"` // nil: to be estimated from the first points after ValidFrom
	SigmaMM   *float64       `json:"sigma_mm"` // process σ, mm; nil: estimated as MR̄/d2
	ValidFrom time.Time      `json:"valid_from"`
	Source    BaselineSource `json:"source"`
	SetBy     string         `json:"set_by"`
	Reason    string         `json:"reason"`
	CreatedAt time.Time      `json:"created_at"`
}

// Validate checks a baseline before it is stored.
func (b *Baseline) Validate() error {
	var f Fields
	if b.ValueMM != nil {
		checkPosition(&f, "value_mm", *b.ValueMM)
	}
	if b.SigmaMM != nil {
		if v := *b.SigmaMM; !finite(v) || v <= 0 || v > 50 {
			f.Add("sigma_mm", "must be a positive spread in mm below 50 (got %v)", v)
		}
	}
	if b.ValidFrom.IsZero() {
		f.Add("valid_from", "is required (RFC 3339)")
	}
	checkText(&f, "reason", b.Reason, 1, 2000)
	return f.Err("the baseline is not valid")
}

// SeriesService reads series and manages their baselines.
type SeriesService interface {
	// MachineSeries lists a machine's series with their point counts and
	// current baselines.
	MachineSeries(ctx context.Context, machineID int64) ([]Series, error)
	// Series returns one series; ENotFound when absent.
	Series(ctx context.Context, id int64) (Series, error)
	// Points returns the current points of a series in measurement order.
	Points(ctx context.Context, seriesID int64) ([]Point, error)
	// SetBaseline stores a new baseline version for a series.
	SetBaseline(ctx context.Context, a Actor, b *Baseline) error
	// Baselines lists every version of a series' baselines, oldest first.
	Baselines(ctx context.Context, seriesID int64) ([]Baseline, error)
}
