package db_test

import (
	"context"
	"strconv"
	"testing"
	"time"

	"halfmark"
)

func fp(v float64) *float64 { return &v }

// Collimator geometry is stored on create, replaced by SetCollimators with
// an audit row, and refused (nothing written) when it is not physical.
func TestCollimators(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: "Linac Vireo", SADcm: 100, MLCLeafPairs: 60,
		Collimators: &halfmark.Collimators{UpperJaws: "y", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50}}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	got, err := d.Machine(ctx, m.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.Collimators == nil || *got.Collimators != (halfmark.Collimators{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50}) {
		t.Fatalf("stored %+v", got.Collimators)
	}
	bad := halfmark.Machine{Name: "Linac Bad", SADcm: 100, Collimators: &halfmark.Collimators{UpperJaws: "X", UpperSCDcm: 40, LowerSCDcm: 30}}
	if err := d.CreateMachine(ctx, a, &bad); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
		t.Fatalf("upper below lower: %v", err)
	}
	if _, err := d.MachineByName(ctx, "Linac Bad"); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Fatalf("a refused machine was stored: %v", err)
	}
	for _, c := range []halfmark.Collimators{
		{UpperJaws: "Z", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50},
		{UpperJaws: "X", UpperSCDcm: 28, LowerSCDcm: 120, MLCSCDcm: 50},
		{UpperJaws: "X", UpperSCDcm: 28, LowerSCDcm: 37},
		{UpperJaws: "X", UpperSCDcm: -1, LowerSCDcm: 37, MLCSCDcm: 50},
	} {
		if _, err := d.SetCollimators(ctx, a, m.ID, c); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
			t.Errorf("%+v: %v", c, err)
		}
	}
	nc := halfmark.Collimators{UpperJaws: "X", UpperSCDcm: 30, LowerSCDcm: 40, MLCSCDcm: 25}
	if _, err := d.SetCollimators(ctx, a, m.ID, nc); err != nil {
		t.Fatal(err)
	}
	got, _ = d.Machine(ctx, m.ID)
	if *got.Collimators != nc {
		t.Fatalf("after set: %+v", got.Collimators)
	}
	if _, err := d.SetCollimators(ctx, a, 999999, nc); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Errorf("unknown machine: %v", err)
	}
	log, err := d.Audit(ctx, "machine", strconv.FormatInt(m.ID, 10), 10)
	if err != nil {
		t.Fatal(err)
	}
	if len(log) != 2 || log[0].Action != "set-collimators" && log[1].Action != "set-collimators" {
		t.Errorf("audit %+v, want create and one set-collimators", log)
	}
}

// PenumbraPoints returns the current penumbra values with SSD and depth
// of the baseline period: superseded checks, checks without SSD and depth
// and points before the period's start are left out.
func TestPenumbraPoints(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: "Linac Vireo", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC)
	tank := halfmark.Setup{SSDcm: fp(90), DepthCm: fp(10), FieldXcm: fp(20), FieldYcm: fp(20)}
	rec := func(at time.Time, s halfmark.Setup, pen float64, supersedes string) string {
		c := halfmark.Check{Method: halfmark.MethodScan, MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: at, Setup: s, Supersedes: supersedes,
			Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 100, PenumbraMM: fp(pen)}, {Edge: "Y2", PositionMM: 100, PenumbraMM: fp(pen + 1)}, {Edge: "X2", PositionMM: 100}}}
		sc, _, err := d.RecordCheck(ctx, a, &c)
		if err != nil {
			t.Fatal(err)
		}
		return sc.ID
	}
	rec(t0, tank, 3.0, "")
	old := rec(t0.AddDate(0, 0, 1), tank, 9.9, "")
	rec(t0.AddDate(0, 0, 1).Add(time.Hour), tank, 3.1, old) // corrects the 9.9
	rec(t0.AddDate(0, 0, 2), halfmark.Setup{FieldXcm: fp(10), FieldYcm: fp(10)}, 2.5, "")
	rec(t0.AddDate(0, 0, 3), halfmark.Setup{SSDcm: fp(100), DepthCm: fp(1.5), FieldXcm: fp(10), FieldYcm: fp(10)}, 2.2, "")

	counts, err := d.PenumbraMethods(ctx, b.ID)
	if err != nil || counts[halfmark.MethodScan] != 6 {
		t.Fatalf("methods %v %v, want 6 scan points", counts, err)
	}
	set, err := d.PenumbraPoints(ctx, b.ID, halfmark.MethodScan, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	if set.Machine.ID != m.ID || set.Beam.Label != "6 MV" || !set.PeriodStart.IsZero() {
		t.Fatalf("set %+v", set)
	}
	var vals []float64
	for _, p := range set.Points {
		vals = append(vals, p.PenumbraMM)
		if p.Method != halfmark.MethodScan || p.SSDcm == 0 {
			t.Errorf("point %+v", p)
		}
	}
	if want := []float64{3.0, 4.0, 3.1, 4.1, 2.2, 3.2}; len(vals) != len(want) {
		t.Fatalf("values %v, want %v", vals, want)
	} else {
		for i := range want {
			if vals[i] != want[i] {
				t.Fatalf("values %v, want %v", vals, want)
			}
		}
	}
	if set.Points[4].DepthCm != 1.5 || set.Points[4].Geometry != "10×10 cm, SSD 100 d 1.5" {
		t.Errorf("point %+v", set.Points[4])
	}
	if set, _ := d.PenumbraPoints(ctx, b.ID, halfmark.MethodFilm, time.Time{}, time.Time{}); len(set.Points) != 0 {
		t.Errorf("film: %d points", len(set.Points))
	}

	// A baseline set on a penumbra series starts a new period.
	ss, err := d.MachineSeries(ctx, m.ID)
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range ss {
		if s.Quantity == halfmark.QPenumbra && s.Edge == "X1" && s.Geometry == tank.Geometry() {
			bl := halfmark.Baseline{SeriesID: s.ID, ValidFrom: t0.AddDate(0, 0, 1), Source: halfmark.BaselineSet, Reason: "new period", SetBy: "test"}
			if err := d.SetBaseline(ctx, a, &bl); err != nil {
				t.Fatal(err)
			}
		}
	}
	set, err = d.PenumbraPoints(ctx, b.ID, halfmark.MethodScan, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	if !set.PeriodStart.Equal(t0.AddDate(0, 0, 1)) || len(set.Points) != 4 {
		t.Errorf("period %v, %d points; want the period from the baseline and 4 points", set.PeriodStart, len(set.Points))
	}
	// Before the baseline the older period is in force.
	set, _ = d.PenumbraPoints(ctx, b.ID, halfmark.MethodScan, time.Time{}, t0.Add(time.Hour))
	if !set.PeriodStart.IsZero() || len(set.Points) != 2 {
		t.Errorf("until the first day: period %v, %d points", set.PeriodStart, len(set.Points))
	}
	if _, err := d.PenumbraPoints(ctx, 999999, halfmark.MethodScan, time.Time{}, time.Time{}); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Errorf("unknown beam: %v", err)
	}
}
