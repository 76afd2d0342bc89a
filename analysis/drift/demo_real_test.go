package drift

import (
	"sort"
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/rawdata"
	"halfmark/deploy/demo"
)

// demoSeries builds the series the store would hold for one demo machine:
// the generator's checks (raw files analysed by the engine as on upload),
// keyed by beam, geometry, edge, quantity and method, with the demo
// loader's commissioning baselines (mean of the commissioning points, σ from
// demo.ReproducibilityMM; none for light offsets).
func demoSeries(t *testing.T, gen *demo.Generator, mi int, m demo.Machine) []SeriesInput {
	id := int64(mi + 1)
	beamIDs := make([]int64, len(m.Beams))
	labels := map[int64]string{}
	for i, b := range m.Beams {
		beamIDs[i] = id*10 + int64(i)
		labels[beamIDs[i]] = halfmark.BeamLabel(b.EnergyMV, b.FFF)
	}
	type key struct {
		beam       int64
		geom, edge string
		q          halfmark.Quantity
		method     halfmark.Method
	}
	byKey := map[key]*SeriesInput{}
	var order []key
	add := func(k key, c *halfmark.Check, v float64) {
		s := byKey[k]
		if s == nil {
			s = &SeriesInput{ID: int64(len(order) + 1), MachineID: id, BeamID: k.beam, MachineName: m.Machine.Name, BeamLabel: labels[k.beam],
				Geometry: k.geom, Edge: k.edge, Quantity: k.q, Method: k.method}
			byKey[k] = s
			order = append(order, k)
		}
		s.Times = append(s.Times, c.MeasuredAt)
		s.ValuesMM = append(s.ValuesMM, v)
		s.Kinds = append(s.Kinds, c.Kind)
		s.CheckIDs = append(s.CheckIDs, "")
	}
	for _, it := range gen.Items(m, id, beamIDs) {
		if it.Event != nil {
			continue
		}
		c := it.Check
		method := halfmark.MethodTyped
		if it.Raw != nil {
			_, edges, err := rawdata.Analyze(it.Raw.Kind, it.Raw.Data, it.Raw.Options)
			if err != nil {
				t.Fatalf("%s %s: %v", m.Machine.Name, it.Raw.Filename, err)
			}
			c.Edges = edges
			method = halfmark.MethodEPID
			if it.Raw.Kind == halfmark.RawProfile {
				method = halfmark.MethodScan
			}
		}
		scale := 1.0 // to the isocentre plane: SAD/(SSD + depth) (check.go, Project)
		if !c.Setup.AtIsocentre() {
			scale = m.Machine.SADcm / (*c.Setup.SSDcm + *c.Setup.DepthCm)
		}
		g := c.Setup.Geometry()
		for _, e := range c.Edges {
			add(key{c.BeamID, g, e.Edge, halfmark.QPosition, method}, &c, e.PositionMM*scale)
			if e.PenumbraMM != nil {
				add(key{c.BeamID, g, e.Edge, halfmark.QPenumbra, method}, &c, *e.PenumbraMM)
			}
			if e.LightPositionMM != nil {
				add(key{c.BeamID, g, e.Edge, halfmark.QLightOffset, method}, &c, (*e.LightPositionMM-e.PositionMM)*scale)
			}
		}
	}
	out := make([]SeriesInput, 0, len(order))
	for _, k := range order {
		s := byKey[k]
		idx := make([]int, len(s.Times))
		for i := range idx {
			idx[i] = i
		}
		sort.SliceStable(idx, func(a, b int) bool { return s.Times[idx[a]].Before(s.Times[idx[b]]) })
		ts, xs, ks := make([]time.Time, len(idx)), make([]float64, len(idx)), make([]halfmark.CheckKind, len(idx))
		for i, j := range idx {
			ts[i], xs[i], ks[i] = s.Times[j], s.ValuesMM[j], s.Kinds[j]
		}
		s.Times, s.ValuesMM, s.Kinds = ts, xs, ks
		if s.Quantity != halfmark.QLightOffset {
			var sum float64
			n := 0
			for i, kd := range s.Kinds {
				if kd == halfmark.KindCommissioning {
					sum, n = sum+s.ValuesMM[i], n+1
				}
			}
			if n > 0 {
				v, sd := sum/float64(n), demo.ReproducibilityMM(s.Quantity, s.Edge, s.Geometry)
				s.BaselineValueMM, s.BaselineSigmaMM = &v, &sd
				from := gen.Start()
				s.BaselineFrom = &from
			}
		}
		out = append(out, *s)
	}
	return out
}

// The demo generator's own data (deploy/demo, seed demo.Seed), analysed
// as on upload: Heron shows exactly one active finding, MLC bank 2 at
// Level 2; Tern exactly one, jaw Y2 at Level 1 with a projected crossing
// within ±20% of the generator's true date (0.006 mm/day from 150 days
// before the end: 2 mm on day 333); Plover none.
func TestDemoGeneratorStories(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and analyses two years of demo images")
	}
	end := time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)
	gen := demo.New(end)
	d := DefaultDetection()
	for mi, m := range demo.Machines() {
		ss := demoSeries(t, gen, mi, m)
		now := newestTime(ss)
		r, err := EvaluateMachine(ss, testBook{}, d, now)
		if err != nil {
			t.Fatal(err)
		}
		act := activeOf(r)
		for _, c := range act {
			t.Logf("%s: %s L%d %s: %s", m.Machine.Name, c.Component, c.Level, c.Crossing.Status, c.Message)
		}
		switch m.Machine.Name {
		case "Tern":
			if len(act) != 1 || act[0].Component != (halfmark.Component{Kind: halfmark.ComponentJaw, Name: "Y2"}) || act[0].Level != halfmark.LevelInspect ||
				act[0].Crossing.Status != halfmark.CrossingProjected {
				t.Errorf("Tern: %d active findings; want exactly jaw Y2 at Level 1 with a projected crossing", len(act))
				continue
			}
			truth := gen.End.AddDate(0, 0, -150).Add(time.Duration(2 / 0.006 * 24 * float64(time.Hour)))
			got := *act[0].Crossing.ToleranceDate
			if rel := got.Sub(truth).Hours() / truth.Sub(now).Hours(); rel > 0.2 || rel < -0.2 {
				t.Errorf("Tern: projected %s, true %s: %.0f%% of the time to go, want within ±20%%", got.Format("2006-01-02"), truth.Format("2006-01-02"), 100*rel)
			}
		case "Heron":
			if len(act) != 1 || act[0].Component != (halfmark.Component{Kind: halfmark.ComponentMLCBank, Name: "bank 2"}) || act[0].Level != halfmark.LevelScheduled {
				t.Errorf("Heron: %d active findings; want exactly MLC bank 2 at Level 2", len(act))
			}
		case "Plover":
			if len(act) != 0 {
				t.Errorf("Plover: %d active findings; want none", len(act))
			}
		}
	}
}
