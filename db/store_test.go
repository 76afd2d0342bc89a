package db_test

import (
	"context"
	"math"
	"testing"
	"time"

	"halfmark"
	"halfmark/db/dbtest"
)

// The core store on its own: machines and beams, checks (idempotent replay,
// correction, projection to the isocentre plane), series and their points,
// baselines, and the stored verdict of a check.
func TestStoreCore(t *testing.T) {
	d := dbtest.Open(t)
	ctx := context.Background()
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: "Linac Core", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	if err := d.CreateMachine(ctx, a, &halfmark.Machine{Name: "Linac Core", SADcm: 100}); halfmark.ErrorCodeOf(err) != halfmark.EConflict {
		t.Errorf("a second machine of the same name: %v; want conflict", err)
	}
	if _, err := d.Machine(ctx, m.ID+1000); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Errorf("unknown machine: %v; want not found", err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	if bs, err := d.Beams(ctx, m.ID); err != nil || len(bs) != 1 || bs[0].ID != b.ID {
		t.Fatalf("Beams: %+v %v", bs, err)
	}

	// A profile at SSD 100 cm, depth 10 cm: the isocentre-plane position is
	// x·SAD/(SSD + d) by similar triangles (analytic): 55 mm → 50 mm.
	ssd, depth, ten := 100.0, 10.0, 10.0
	c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: time.Now().Add(-2 * time.Hour),
		Setup: halfmark.Setup{SSDcm: &ssd, DepthCm: &depth, FieldXcm: &ten, FieldYcm: &ten},
		Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 55}, {Edge: "X2", PositionMM: 55}}}
	st, created, err := d.RecordCheck(ctx, a, &c)
	if err != nil || !created {
		t.Fatalf("RecordCheck: %v created=%v", err, created)
	}
	got, err := d.Check(ctx, st.ID)
	if err != nil || len(got.Edges) != 2 || math.Abs(got.Edges[0].IsoPositionMM-50) > 1e-9 {
		t.Fatalf("Check: %+v %v; want X1 at 50 mm in the isocentre plane", got.Edges, err)
	}
	// The same id again is a replay: nothing new is stored.
	again := c
	again.ID = st.ID
	if _, created, err := d.RecordCheck(ctx, a, &again); err != nil || created {
		t.Errorf("replay: created=%v %v; want an unchanged replay", created, err)
	}
	if cs, err := d.Checks(ctx, halfmark.CheckFilter{MachineID: m.ID}); err != nil || len(cs) != 1 {
		t.Fatalf("Checks after replay: %d %v", len(cs), err)
	}

	// Its series: X1 and X2 position (and no penumbra: none was given).
	ss, err := d.MachineSeries(ctx, m.ID)
	if err != nil || len(ss) != 2 {
		t.Fatalf("MachineSeries: %+v %v", ss, err)
	}
	x1 := ss[0]
	if x1.Edge != "X1" || x1.Quantity != halfmark.QPosition || x1.Points != 1 {
		t.Fatalf("first series %+v", x1)
	}

	// A correction supersedes the check: the series keeps one point, the new value.
	fix := c
	fix.ID, fix.Supersedes = "", st.ID
	fix.Edges = []halfmark.EdgeResult{{Edge: "X1", PositionMM: 55.55}, {Edge: "X2", PositionMM: 55}}
	fixed, _, err := d.RecordCheck(ctx, a, &fix)
	if err != nil {
		t.Fatal(err)
	}
	pts, err := d.Points(ctx, x1.ID)
	if err != nil || len(pts) != 1 || pts[0].CheckID != fixed.ID || math.Abs(pts[0].Value-50.5) > 1e-9 {
		t.Fatalf("Points after correction: %+v %v; want one point at 55.55·100/110 = 50.5 mm", pts, err)
	}
	if old, _ := d.Check(ctx, st.ID); old.SupersededBy != fixed.ID {
		t.Errorf("the old check does not name its correction: %q", old.SupersededBy)
	}

	// Baselines are versions, never changed.
	v := 50.0
	for i := 0; i < 2; i++ {
		bl := halfmark.Baseline{SeriesID: x1.ID, ValueMM: &v, ValidFrom: time.Now().Add(-time.Hour), Source: halfmark.BaselineSet, SetBy: "test", Reason: "commissioning"}
		if err := d.SetBaseline(ctx, a, &bl); err != nil {
			t.Fatal(err)
		}
	}
	if bls, err := d.Baselines(ctx, x1.ID); err != nil || len(bls) != 2 || bls[0].Version != 1 || bls[1].Version != 2 {
		t.Fatalf("Baselines: %+v %v", bls, err)
	}

	// The stored verdict: pending until an evaluation has seen the check,
	// then the stored level.
	vs, err := d.CheckVerdicts(ctx, fixed.ID)
	if err != nil || len(vs) != 2 || vs[0].Evaluated {
		t.Fatalf("verdicts before evaluation: %+v %v; want two, pending", vs, err)
	}
	loaded, err := d.LoadMachineSeries(ctx, x1.MachineID, time.Now())
	if err != nil {
		t.Fatalf("LoadMachineSeries: %v", err)
	}
	var sv []halfmark.SeriesVerdict
	for _, s := range loaded {
		if s.ID == x1.ID {
			sv = append(sv, halfmark.SeriesVerdict{Series: s, Evaluation: halfmark.SeriesEvaluation{SeriesID: s.ID,
				Level: halfmark.LevelScheduled, Verdict: halfmark.VerdictSignal, Rule: "beyond tolerance"}})
		}
	}
	if len(sv) != 1 {
		t.Fatalf("series %d not loaded with its machine", x1.ID)
	}
	if err := d.RecordMachineEvaluation(ctx, &halfmark.MachineEvaluation{MachineID: x1.MachineID, At: time.Now(), ToleranceHash: "h", Series: sv}, nil); err != nil {
		t.Fatal(err)
	}
	vs, err = d.CheckVerdicts(ctx, fixed.ID)
	if err != nil || len(vs) != 2 {
		t.Fatal(err)
	}
	for _, v := range vs {
		want := v.Edge == "X1"
		if v.Evaluated != want || (want && (v.Level != halfmark.LevelScheduled || v.Rule != "beyond tolerance")) {
			t.Errorf("verdict %+v; want X1 evaluated at Level 2, X2 pending", v)
		}
	}
	if _, err := d.CheckVerdicts(ctx, "0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60"); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Errorf("verdicts of an unknown check: %v; want not found", err)
	}
}
