package worker

import (
	"testing"
	"time"

	"halfmark"
)

// db.LoadEvalSeries reads each series' points with its own query; it must
// give exactly the points of the series_points view (db.Points) for every
// quantity, leaving out superseded checks.
func TestLoadEvalSeriesMatchesSeriesPoints(t *testing.T) {
	f := newFixture(t)
	var ids []string
	for k := 0; k < 4; k++ {
		at := day0.AddDate(0, 0, k)
		f.clock.Set(at.Add(time.Minute))
		c := halfmark.Check{MachineID: f.machine.ID, BeamID: f.beam.ID, Kind: halfmark.KindMonthly, MeasuredAt: at,
			Setup: halfmark.Setup{FieldXcm: fptr(20), FieldYcm: fptr(10)},
			Edges: []halfmark.EdgeResult{
				{Edge: "X1", PositionMM: 100 + float64(k), PenumbraMM: fptr(3 + 0.1*float64(k)), LightPositionMM: fptr(100.5 + float64(k))},
				{Edge: "Y2", PositionMM: 50 - float64(k)},
			}}
		sc, _, err := f.db.RecordCheck(f.ctx, halfmark.CLIActor("test"), &c)
		if err != nil {
			t.Fatal(err)
		}
		ids = append(ids, sc.ID)
	}
	fix := halfmark.Check{MachineID: f.machine.ID, BeamID: f.beam.ID, Kind: halfmark.KindMonthly, MeasuredAt: day0.AddDate(0, 0, 1),
		Supersedes: ids[1], Setup: halfmark.Setup{FieldXcm: fptr(20), FieldYcm: fptr(10)},
		Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 111}, {Edge: "Y2", PositionMM: 44}}}
	if _, _, err := f.db.RecordCheck(f.ctx, halfmark.CLIActor("test"), &fix); err != nil {
		t.Fatal(err)
	}
	loaded, err := f.db.LoadMachineSeries(f.ctx, f.machine.ID, f.clock.Now())
	if err != nil {
		t.Fatal(err)
	}
	if len(loaded) != 4 { // X1 position, penumbra, light offset; Y2 position
		t.Fatalf("%d series, want 4", len(loaded))
	}
	for _, s := range loaded {
		want, err := f.db.Points(f.ctx, s.ID)
		if err != nil {
			t.Fatal(err)
		}
		if len(want) != len(s.ValuesMM) {
			t.Errorf("series %d (%s %s): %d points, the view has %d", s.ID, s.Edge, s.Quantity, len(s.ValuesMM), len(want))
			continue
		}
		for i, p := range want {
			if p.Value != s.ValuesMM[i] || !p.MeasuredAt.Equal(s.Times[i]) || p.Kind != s.Kinds[i] {
				t.Errorf("series %d point %d: %v at %s, the view has %v at %s", s.ID, i, s.ValuesMM[i], s.Times[i], p.Value, p.MeasuredAt)
			}
		}
	}
}
