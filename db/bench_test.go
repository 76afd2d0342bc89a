package db_test

import (
	"context"
	"testing"
	"time"

	"github.com/google/uuid"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

// BenchmarkRecordBatch2500 stores 2,500 checks × 4 jaw edges (10,000 edge
// results) per iteration through the store, without HTTP.
func BenchmarkRecordBatch2500(b *testing.B) {
	ctx := context.Background()
	url := dbtest.New(b)
	if err := db.Migrate(ctx, url, nil); err != nil {
		b.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	defer d.Close()
	a := halfmark.CLIActor("bench")
	m := halfmark.Machine{Name: "Bench", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		b.Fatal(err)
	}
	bm := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &bm); err != nil {
		b.Fatal(err)
	}
	f := func(v float64) *float64 { return &v }
	base := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	b.ResetTimer()
	for it := 0; it < b.N; it++ {
		b.StopTimer()
		cs := make([]halfmark.Check, 2500)
		for i := range cs {
			cs[i] = halfmark.Check{ID: uuid.NewString(), MachineID: m.ID, BeamID: bm.ID, Kind: halfmark.KindMorning,
				MeasuredAt: base.Add(time.Duration(it*2500+i) * time.Hour),
				Setup:      halfmark.Setup{SSDcm: f(100), DepthCm: f(10), FieldXcm: f(10), FieldYcm: f(10)}}
			for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
				cs[i].Edges = append(cs[i].Edges, halfmark.EdgeResult{Edge: e, PositionMM: 55, PenumbraMM: f(3.2)})
			}
		}
		b.StartTimer()
		if _, err := d.RecordBatch(ctx, a, cs); err != nil {
			b.Fatal(err)
		}
	}
}
