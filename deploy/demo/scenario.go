// Package demo generates the invented demo clinic — Kestrel Bay Radiotherapy
// Centre with three linear accelerators — from a fixed seed: two years of
// morning checks, monthly water-tank profiles, EPID images and MLC picket
// fences, commissioning measurements and a service event. Everything here
// is invented for the demonstration; none of it is measured data.
//
// The story: on Tern the Y2 jaw creeps outward slowly (a Level 1 drift with
// a projected crossing date); on Heron a service on the MLC leaves bank 2
// offset by 0.9 mm (Level 2: a bank mean beyond the 0.5 mm bank-mean
// tolerance of the shipped tolerance book and inside its 1 mm action limit,
// with the leaves that stray furthest beyond the 1 mm leaf tolerance);
// Plover is steady; on Avocet the focal spot grows after a target service,
// widening the penumbra of the upper jaws most (see avocet.go).
package demo

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"time"

	"halfmark"
	"halfmark/analysis/epid"
	"halfmark/analysis/epid/synth"
)

// Seed fixes the whole scenario.
const Seed = 20261202

// Clinic is the invented clinic's name.
const Clinic = "Kestrel Bay Radiotherapy Centre"

// Person is an invented member of staff.
type Person struct {
	Email, Name string
	Role        halfmark.Role
	Password    string
}

// Staff are the demo users.
var Staff = []Person{
	{"chief@kestrel-bay.example", "Dr. Oriel Stavenhagen (chief physicist)", halfmark.RolePhysicist, "kestrel-demo-chief"},
	{"physicist@kestrel-bay.example", "Priya Castellane (physicist)", halfmark.RolePhysicist, "kestrel-demo-physics"},
	{"console@kestrel-bay.example", "Ines Vardalo (therapist)", halfmark.RoleTherapist, "kestrel-demo-console"},
	{"admin@kestrel-bay.example", "Tomas Greyholm (IT)", halfmark.RoleAdmin, "kestrel-demo-admin"},
}

var therapists = []string{"I. Vardalo", "J. Okafor-Reyes", "M. Lindqvist-Hale", "S. Adebayo-Corr"}
var physicists = []string{"P. Castellane", "O. Stavenhagen"}

// Raw is one raw measurement of a check, to be analysed by the engine.
type Raw struct {
	Kind     halfmark.RawKind
	Filename string
	Data     []byte
	Options  json.RawMessage
	Keep     bool // store the raw file (else only the computed edges)
}

// Item is one thing to store, in time order.
type Item struct {
	Check halfmark.Check // edges filled for typed checks, empty when Raw is set
	Raw   *Raw
	Event *halfmark.ServiceEvent // a service note instead of a check
}

// Beam is a beam of a demo machine.
type Beam struct {
	EnergyMV float64
	FFF      bool
}

// Machine is a demo machine with what happens to it.
type Machine struct {
	Machine halfmark.Machine
	Beams   []Beam
	Story   string
}

// Machines are the four demo linacs. Their collimator distances are
// invented.
func Machines() []Machine {
	generic := func() *halfmark.Collimators {
		return &halfmark.Collimators{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 36.7, MLCSCDcm: 50.9}
	}
	return []Machine{
		{halfmark.Machine{Name: "Tern", SADcm: 100, Model: "generic C-arm linac", Serial: "KB-T-0417", MLCLeafPairs: 60, MLCLayout: "60", Clinical: true, Collimators: generic()},
			[]Beam{{6, false}, {6, true}, {10, false}}, "Y2 jaw drifting outward slowly"},
		{halfmark.Machine{Name: "Heron", SADcm: 100, Model: "generic C-arm linac", Serial: "KB-H-0822", MLCLeafPairs: 60, MLCLayout: "60", Clinical: true, Collimators: generic()},
			[]Beam{{6, false}, {10, true}}, "MLC bank 2 offset after a service"},
		{halfmark.Machine{Name: "Plover", SADcm: 100, Model: "generic C-arm linac", Serial: "KB-P-1193", MLCLeafPairs: 60, MLCLayout: "60", Clinical: true, Collimators: generic()},
			[]Beam{{6, false}, {15, false}}, "steady"},
		{halfmark.Machine{Name: avocet, SADcm: 100, Model: "generic C-arm linac, second type", Serial: "KB-A-1508", MLCLeafPairs: 60, MLCLayout: "60", Clinical: true,
			Collimators: &halfmark.Collimators{UpperJaws: "X", UpperSCDcm: 27, LowerSCDcm: 36, MLCSCDcm: 45}},
			[]Beam{{6, false}, {10, false}}, "focal spot larger after a target service: upper-jaw penumbra wider"},
	}
}

// Generator makes the scenario's items for one machine.
type Generator struct {
	End   time.Time // the last day of data (the demo's "today")
	Years int       // history length, default 2
	rng   *rand.Rand
}

// New returns a generator whose data end on end.
func New(end time.Time) *Generator {
	return &Generator{End: end.UTC().Truncate(24 * time.Hour), Years: 2, rng: rand.New(rand.NewPCG(Seed, 7))}
}

// Start is the commissioning day.
func (g *Generator) Start() time.Time { return g.End.AddDate(-g.Years, 0, 0) }

func f(v float64) *float64 { return &v }

func (g *Generator) noise(sd float64) float64 { return sd * g.rng.NormFloat64() }

// truth is the true 50% position (mm at the isocentre) of a jaw edge of a
// nominal 10×10 cm field on machine m at time t: 50 mm plus the story's
// drift.
func (g *Generator) truth(m string, edge string, t time.Time) float64 {
	v := 50.0
	if m == "Tern" && edge == "Y2" {
		// Outward creep starting 150 days before the end: 0.006 mm/day.
		if d := t.Sub(g.End.AddDate(0, 0, -150)).Hours() / 24; d > 0 {
			v += 0.006 * d
		}
	}
	return v
}

// serviceDay is Heron's MLC service.
func (g *Generator) serviceDay() time.Time { return g.End.AddDate(0, 0, -95).Add(14 * time.Hour) }

// Items returns every item of machine mi (index into Machines), in time
// order. beamIDs and machineID are the stored ids.
func (g *Generator) Items(m Machine, machineID int64, beamIDs []int64) []Item {
	var out []Item
	start := g.Start()
	name := m.Machine.Name
	iso := halfmark.Setup{FieldXcm: f(10), FieldYcm: f(10)}
	tank := halfmark.Setup{SSDcm: f(90), DepthCm: f(10), FieldXcm: f(20), FieldYcm: f(20)}
	// Commissioning: the typed jaw readings and the tank profiles of each beam.
	for bi, b := range m.Beams {
		at := start.Add(time.Duration(10+bi) * time.Hour)
		c := halfmark.Check{MachineID: machineID, BeamID: beamIDs[bi], Kind: halfmark.KindCommissioning, MeasuredAt: at,
			Device: "light field and graph paper", Operator: physicists[0], Setup: iso,
			Note: "commissioning reference"}
		for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
			c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e, PositionMM: round2(g.truth(name, e, at) + g.noise(0.02))})
		}
		out = append(out, Item{Check: c})
		if name == avocet {
			out = append(out, g.avocetTank(m, machineID, beamIDs[bi], b, at.Add(time.Hour), halfmark.KindCommissioning, true, 0.02)...)
			continue
		}
		for ai, axis := range []string{"X", "Y"} {
			ct := halfmark.Check{MachineID: machineID, BeamID: beamIDs[bi], Kind: halfmark.KindCommissioning,
				MeasuredAt: at.Add(time.Duration(ai+1) * time.Hour), Device: "water tank, 0.04 cm³ chamber", Operator: physicists[0], Setup: tank}
			out = append(out, Item{Check: ct, Raw: g.profile(name, b, axis, ct.MeasuredAt, true, 0.02)})
		}
	}
	// The MLC reference is the mean of five repeated picket-fence exposures.
	for r := 0; r < 5; r++ {
		out = append(out, g.picketItem(m, machineID, beamIDs[0], start.Add(20*time.Hour+time.Duration(r)*10*time.Minute), halfmark.KindCommissioning, r == 0))
	}
	// Daily morning checks on weekdays, every beam; a monthly session on the
	// second Tuesday; EPID images every third month.
	for d := start.AddDate(0, 0, 1); !d.After(g.End); d = d.AddDate(0, 0, 1) {
		if name == "Heron" && sameDay(d, g.serviceDay()) {
			out = append(out, Item{Event: &halfmark.ServiceEvent{MachineID: machineID, At: g.serviceDay(),
				Note: "MLC bank 2 leaf drive motors replaced; leaf positions recalibrated by the service engineer"}})
		}
		if name == avocet && sameDay(d, g.avocetService()) {
			out = append(out, Item{Event: &halfmark.ServiceEvent{MachineID: machineID, At: g.avocetService(),
				Note: "target replaced and beam steering re-tuned by the service engineer"}})
		}
		if wd := d.Weekday(); wd == time.Saturday || wd == time.Sunday {
			continue
		}
		for bi := range m.Beams {
			at := d.Add(time.Duration(7*60+5+bi*4+g.rng.IntN(20)) * time.Minute)
			c := halfmark.Check{MachineID: machineID, BeamID: beamIDs[bi], Kind: halfmark.KindMorning, MeasuredAt: at,
				Device: "console readout + light field", Operator: therapists[g.rng.IntN(len(therapists))], Setup: iso}
			for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
				c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e, PositionMM: round1(g.truth(name, e, at) + g.noise(0.15))})
			}
			out = append(out, Item{Check: c})
		}
		if d.Weekday() == time.Tuesday && d.Day() > 7 && d.Day() <= 14 {
			monthsAgo := int(g.End.Sub(d).Hours() / 24 / 30)
			for bi, b := range m.Beams {
				if name == avocet {
					out = append(out, g.avocetTank(m, machineID, beamIDs[bi], b, d.Add(time.Duration(17*60+bi*60)*time.Minute), halfmark.KindMonthly, monthsAgo < 4, 0.1)...)
					continue
				}
				for ai, axis := range []string{"X", "Y"} {
					at := d.Add(time.Duration(18*60+bi*25+ai*10) * time.Minute)
					c := halfmark.Check{MachineID: machineID, BeamID: beamIDs[bi], Kind: halfmark.KindMonthly, MeasuredAt: at,
						Device: "water tank, 0.04 cm³ chamber", Operator: physicists[g.rng.IntN(len(physicists))], Setup: tank}
					out = append(out, Item{Check: c, Raw: g.profile(name, b, axis, at, monthsAgo < 4, 0.1)})
				}
			}
			out = append(out, g.picketItem(m, machineID, beamIDs[0], d.Add(19*time.Hour), halfmark.KindMonthly, monthsAgo < 3))
			if d.Month()%3 == 0 && name != "Heron" {
				at := d.Add(19*time.Hour + 30*time.Minute)
				c := halfmark.Check{MachineID: machineID, BeamID: beamIDs[0], Kind: halfmark.KindMonthly, MeasuredAt: at,
					Device: "EPID", Operator: physicists[0], Setup: iso}
				out = append(out, Item{Check: c, Raw: g.epidField(name, at, monthsAgo < 7)})
			}
		}
	}
	return out
}

func sameDay(a, b time.Time) bool {
	ay, am, ad := a.Date()
	by, bm, bd := b.Date()
	return ay == by && am == bm && ad == bd
}

func round1(v float64) float64 { return math.Round(v*10) / 10 }
func round2(v float64) float64 { return math.Round(v*100) / 100 }

// profile renders a water-tank scan of a 20×20 cm field at SSD 90 cm,
// depth 10 cm (the measurement plane is at 100 cm, the isocentre plane):
// error-function edges of σ = 2.2 mm (6 MV) to 2.8 mm (15 MV), a slight
// horn for flattened beams and a peaked shape for FFF beams, sampled every
// 0.5 mm with 0.2% noise. setupSD (mm) is the day's setup and jaw
// reproducibility: small for the careful commissioning scans.
func (g *Generator) profile(m string, b Beam, axis string, at time.Time, keep bool, setupSD float64) *Raw {
	lo, hi := 100.0, 100.0
	if axis == "Y" {
		lo = 100 + (g.truth(m, "Y1", at) - 50) // a jaw's calibration offset is the same at every field size
		hi = 100 + (g.truth(m, "Y2", at) - 50)
	}
	lo += g.noise(setupSD)
	hi += g.noise(setupSD)
	sigma := 2.0 + 0.05*b.EnergyMV
	var sb strings.Builder
	fmt.Fprintf(&sb, "# %s, %s, %s profile, 20x20 cm, SSD 90 cm, depth 10 cm (invented demo data)\nposition_mm,signal\n",
		m, halfmark.BeamLabel(b.EnergyMV, b.FFF), axis)
	for x := -150.0; x <= 150.0001; x += 0.5 {
		shape := 1 + 0.00000045*x*x // a slight horn
		if b.FFF {
			shape = 1 / (1 + (x/160)*(x/160))
		}
		v := 100*shape*(synth.Phi((x+lo)/sigma)-synth.Phi((x-hi)/sigma)) + 0.6
		v *= 1 + g.noise(0.002)
		fmt.Fprintf(&sb, "%.1f,%.3f\n", x, v)
	}
	opts, _ := json.Marshal(map[string]any{"axis": axis})
	return &Raw{Kind: halfmark.RawProfile, Filename: fmt.Sprintf("%s-%s-%s-%s.csv", strings.ToLower(m),
		strings.ReplaceAll(strings.ToLower(halfmark.BeamLabel(b.EnergyMV, b.FFF)), " ", ""), strings.ToLower(axis), at.Format("20060102")),
		Data: []byte(sb.String()), Options: opts, Keep: keep}
}

// epidField renders a 10×10 cm EPID image at SID 1500 mm with the jaw
// truth of the day.
func (g *Generator) epidField(m string, at time.Time, keep bool) *Raw {
	img := synth.Default
	ar, ac := img.Axis()
	fld := synth.Field{X1: g.truth(m, "X1", at) + g.noise(0.05), X2: g.truth(m, "X2", at) + g.noise(0.05),
		Y1: g.truth(m, "Y1", at) + g.noise(0.05), Y2: g.truth(m, "Y2", at) + g.noise(0.05),
		Sigma: 1.6, Bg: 400, Amp: 20000, Noise: 40, Seed: uint64(at.Unix())}
	data, err := synth.RTImage{Imager: img, Frames: [][]float64{fld.Pixels(img, ar, ac)}}.Bytes()
	if err != nil {
		panic(err) // the synthetic image is built from constants: a failure is a programming error
	}
	return &Raw{Kind: halfmark.RawImage, Filename: fmt.Sprintf("%s-epid-10x10-%s.dcm", strings.ToLower(m), at.Format("20060102")), Data: data, Keep: keep}
}

// picketItem renders a picket fence (five 5 mm strips 30 mm apart) with
// the story's MLC errors and returns it as a check to analyse.
func (g *Generator) picketItem(m Machine, machineID, beamID int64, at time.Time, kind halfmark.CheckKind, keep bool) Item {
	name := m.Machine.Name
	pk := synth.Picket{LeafWidthsMM: epid.Layout60.WidthsMM, Pickets: []float64{-60, -30, 0, 30, 60}, Width: 5, Sigma: 0.9,
		YJaw: 98, Bg: 300, Amp: 18000, Noise: 30, Seed: uint64(at.Unix()),
		Err1: map[[2]int]float64{}, Err2: map[[2]int]float64{}}
	sd := 0.08 // leaf positioning reproducibility, mm
	if kind == halfmark.KindCommissioning {
		sd = 0.02 // the reference is the mean of repeated exposures
	}
	for pair := 1; pair <= 60; pair++ {
		for j := range pk.Pickets {
			pk.Err1[[2]int{pair, j}] = g.noise(sd)
			pk.Err2[[2]int{pair, j}] = g.noise(sd)
			if name == "Heron" && at.After(g.serviceDay()) {
				pk.Err2[[2]int{pair, j}] += 0.9
			}
		}
	}
	data, err := synth.RTImage{Imager: synth.Default, Frames: [][]float64{pk.Pixels(synth.Default)}}.Bytes()
	if err != nil {
		panic(err)
	}
	opts, _ := json.Marshal(map[string]any{"pickets_mm": pk.Pickets, "layout": "60", "tolerance_mm": 0.5})
	c := halfmark.Check{MachineID: machineID, BeamID: beamID, Kind: kind, MeasuredAt: at, Device: "EPID picket fence",
		Operator: physicists[0], Setup: halfmark.Setup{FieldXcm: f(20), FieldYcm: f(20)}}
	return Item{Check: c, Raw: &Raw{Kind: halfmark.RawPicket, Filename: fmt.Sprintf("%s-picket-%s.dcm", strings.ToLower(name), at.Format("20060102")),
		Data: data, Options: opts, Keep: keep}}
}

// ReproducibilityMM is the day-to-day spread (1 σ, mm) the demo's
// commissioning found for a series — the σ its baselines carry: 0.15 mm for
// typed jaw readings, 0.1 mm for tank-scan edges, 0.08 mm for leaf ends,
// 0.05 mm for penumbrae. These are the values the generator draws with.
func ReproducibilityMM(q halfmark.Quantity, edge, geometry string) float64 {
	switch {
	case q == halfmark.QPenumbra:
		return 0.05
	case strings.HasPrefix(edge, "B"):
		return 0.08
	case strings.Contains(geometry, "SSD"):
		return 0.1
	}
	return 0.15
}
