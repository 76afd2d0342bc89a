package drift

import (
	"math"
	"math/rand/v2"
	"strings"
	"time"

	"halfmark"
)

// testBook holds the values of the shipped tolerance example
// (deploy/tolerances.example.toml): AAPM TG-142 (Klein et al., Med Phys
// 36:4197, 2009) Tables II and III where published, local choices
// elsewhere.
type testBook struct{}

func (testBook) Limits(q halfmark.Quantity, kind halfmark.CheckKind, edge string, asym bool) (halfmark.Limits, bool) {
	mlc := false
	if e, err := halfmark.ParseEdge(edge); err == nil && e.Jaw == "" {
		mlc = true
	}
	l := func(t, a float64) (halfmark.Limits, bool) {
		return halfmark.Limits{ToleranceMM: t, ActionMM: a, Source: "test"}, true
	}
	switch q {
	case halfmark.QPosition:
		if mlc {
			return l(1, 1.5)
		}
		if asym && kind != halfmark.KindMorning {
			return l(1, 1.5)
		}
		return l(2, 3)
	case QMLCLeaf:
		return l(1, 1.5)
	case QMLCBankMean:
		return l(0.5, 1)
	case QFieldSize:
		if asym && kind != halfmark.KindMorning {
			return l(1, 1.5)
		}
		return l(2, 3)
	case QCentreOffset:
		return l(1, 1.5)
	case halfmark.QLightOffset:
		if asym {
			return l(1, 1.5)
		}
		return l(2, 3)
	case halfmark.QPenumbra:
		return l(1, 2)
	}
	return halfmark.Limits{}, false
}
func (testBook) Hash() string           { return "test" }
func (testBook) Source() string         { return "test book (shipped example values)" }
func (testBook) IsShippedExample() bool { return true }

// model is a stated model of one machine's QA streams, used by the demo
// story tests and the detection benchmark: every value is
// truth + N(0, σ²), truth = baseline + the scenario's change (analytic:
// known parameters).
type model struct {
	name   string
	id     int64
	beams  []string // beam labels
	setups []string // typed daily setups (geometries)
	start  time.Time
	days   int // calendar days simulated
	// σ per view, mm.
	jawSD, scanSD, penSD, leafSD, lightSD float64
	round                                 float64 // typed readings rounded to this many mm (0: none)
	scans                                 bool    // monthly tank scans of every jaw edge per beam
	leaves                                int     // leaf pairs per bank (0: no picket fence)
	lights                                bool    // monthly light-offset series per jaw
	penumbrae                             bool
	stored                                bool // baselines stored (value and σ) or estimated from N points
	// change adds the scenario's change (mm) to a series' truth at t.
	change func(s *SeriesInput, t time.Time) float64
}

func (m *model) series() []SeriesInput {
	var out []SeriesInput
	id := m.id * 10000
	add := func(beam int, label, geom, edge string, q halfmark.Quantity, meth halfmark.Method, sd float64) {
		id++
		s := SeriesInput{ID: id, MachineID: m.id, BeamID: m.id*10 + int64(beam), MachineName: m.name, BeamLabel: label,
			Geometry: geom, Edge: edge, Quantity: q, Method: meth}
		if m.stored {
			v, sg := 0.0, sd
			if q == halfmark.QPosition && !strings.HasPrefix(edge, "B") {
				v = 50
				if strings.Contains(geom, "SSD") {
					v = 100
				}
			}
			if q == halfmark.QPenumbra {
				v = 6
			}
			s.BaselineValueMM, s.BaselineSigmaMM = &v, &sg
		}
		out = append(out, s)
	}
	for bi, b := range m.beams {
		for _, g := range m.setups {
			for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
				add(bi, b, g, e, halfmark.QPosition, halfmark.MethodTyped, m.jawSD)
			}
		}
		if m.scans {
			for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
				add(bi, b, "20×20 cm, SSD 90 cm, depth 10 cm", e, halfmark.QPosition, halfmark.MethodScan, m.scanSD)
			}
		}
		if m.penumbrae {
			for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
				add(bi, b, "20×20 cm, SSD 90 cm, depth 10 cm", e, halfmark.QPenumbra, halfmark.MethodScan, m.penSD)
			}
		}
	}
	if m.lights {
		for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
			add(0, m.beams[0], "10×10 cm, iso", e, halfmark.QLightOffset, halfmark.MethodTyped, m.lightSD)
		}
	}
	for bank := 1; bank <= 2 && m.leaves > 0; bank++ {
		for p := 1; p <= m.leaves; p++ {
			add(0, m.beams[0], "20×20 cm, iso", "B"+string(rune('0'+bank))+"P"+itoa(p), halfmark.QPosition, halfmark.MethodEPID, m.leafSD)
		}
	}
	return out
}

func itoa(n int) string {
	if n < 10 {
		return string(rune('0' + n))
	}
	return itoa(n/10) + string(rune('0'+n%10))
}

// fill draws every series' points over the model's days: typed jaws every
// weekday at 07:30 + 4 min per beam; scans, penumbrae, light offsets and
// picket fences every 30 days at 18:00.
func (m *model) fill(ss []SeriesInput, rng *rand.Rand) {
	for i := range ss {
		s := &ss[i]
		s.Times, s.ValuesMM, s.Kinds = s.Times[:0], s.ValuesMM[:0], s.Kinds[:0]
	}
	for day := 0; day < m.days; day++ {
		d := m.start.AddDate(0, 0, day)
		weekday := d.Weekday() != time.Saturday && d.Weekday() != time.Sunday
		monthly := day%30 == 15
		for i := range ss {
			s := &ss[i]
			var at time.Time
			var sd, truth float64
			kind := halfmark.KindMonthly
			switch {
			case s.Method == halfmark.MethodTyped && s.Quantity == halfmark.QPosition:
				if !weekday {
					continue
				}
				at = d.Add(7*time.Hour + 30*time.Minute + time.Duration(s.BeamID%10)*4*time.Minute)
				sd, truth, kind = m.jawSD, 50, halfmark.KindMorning
			default:
				if !monthly {
					continue
				}
				at = d.Add(18 * time.Hour)
				switch {
				case s.Quantity == halfmark.QPenumbra:
					sd, truth = m.penSD, 6
				case s.Quantity == halfmark.QLightOffset:
					sd = m.lightSD
				case strings.HasPrefix(s.Edge, "B"):
					sd = m.leafSD
				default:
					sd, truth = m.scanSD, 100
				}
			}
			v := truth + sd*rng.NormFloat64() + m.changeOf(s, at)
			if m.round > 0 && s.Method == halfmark.MethodTyped {
				v = math.Round(v/m.round) * m.round
			}
			s.Times = append(s.Times, at)
			s.ValuesMM = append(s.ValuesMM, v)
			s.Kinds = append(s.Kinds, kind)
		}
	}
}

func (m *model) changeOf(s *SeriesInput, t time.Time) float64 {
	if m.change == nil {
		return 0
	}
	return m.change(s, t)
}

// truncate returns the series cut at time t (points at or before it).
func truncate(ss []SeriesInput, t time.Time) []SeriesInput {
	out := make([]SeriesInput, len(ss))
	for i, s := range ss {
		n := len(s.Times)
		for n > 0 && s.Times[n-1].After(t) {
			n--
		}
		s.Times, s.ValuesMM, s.Kinds = s.Times[:n], s.ValuesMM[:n], s.Kinds[:n]
		out[i] = s
	}
	return out
}
