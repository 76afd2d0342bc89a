package demo

import (
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/penumbra"
	"halfmark/analysis/rawdata"
)

// Avocet's story as the penumbra model reads it: the profiles the demo
// renders are analysed by the engine, the model is fitted on the points
// before the target service and the change after it is classified. The
// data come from the stated model with known values (σ_s 0.45 → 0.60 mm),
// so this is an analytic check of the scenario.
func TestAvocetStory(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and analyses two years of Avocet's profiles")
	}
	g := New(time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC))
	var m Machine
	for _, x := range Machines() {
		if x.Machine.Collimators == nil {
			t.Fatalf("%s has no collimator geometry", x.Machine.Name)
		}
		if err := x.Machine.Validate(); err != nil {
			t.Fatalf("%s: %v", x.Machine.Name, err)
		}
		if x.Machine.Name == avocet {
			m = x
		}
	}
	var set halfmark.PenumbraSet
	set.Machine = m.Machine
	var service time.Time
	for _, it := range g.Items(m, 4, []int64{10, 11}) {
		if it.Event != nil {
			service = it.Event.At
		}
		if it.Raw == nil || it.Raw.Kind != halfmark.RawProfile || it.Check.BeamID != 10 {
			continue
		}
		_, edges, err := rawdata.Analyze(it.Raw.Kind, it.Raw.Data, it.Raw.Options)
		if err != nil {
			t.Fatal(err)
		}
		s := it.Check.Setup
		for _, e := range edges {
			if e.PenumbraMM != nil {
				set.Points = append(set.Points, halfmark.PenumbraPoint{At: it.Check.MeasuredAt, SSDcm: *s.SSDcm, DepthCm: *s.DepthCm,
					Geometry: s.Geometry(), Edge: e.Edge, Method: halfmark.MethodScan, PenumbraMM: *e.PenumbraMM})
			}
		}
	}
	if service.IsZero() {
		t.Fatal("no service event")
	}
	pts, geo, err := penumbra.FromSet(set)
	if err != nil {
		t.Fatal(err)
	}
	var before, after []penumbra.Point
	for _, p := range pts {
		if p.At.Before(service) {
			before = append(before, p)
		} else {
			after = append(after, p)
		}
	}
	model, err := penumbra.Fit(before, geo)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("before the service: σ_s %.3f ± %.3f mm, R %v, RMS %.3f mm, %d points", model.SourceSigmaMM, model.SourceSigmaSEMM, model.R, model.RMSResidualMM, model.PointsUsed)
	if d := model.SourceSigmaMM - 0.45; d < -0.1 || d > 0.1 {
		t.Errorf("σ_s %.3f mm, the scenario's 0.45 mm", model.SourceSigmaMM)
	}
	cause, msg, err := penumbra.Classify(model, after)
	if err != nil {
		t.Fatal(err)
	}
	t.Log(msg)
	if cause.Kind != penumbra.CauseSource || cause.SourceSigmaChangeMM < 0.05 || cause.SourceSigmaChangeMM > 0.25 {
		t.Errorf("cause %+v, want a larger source (σ_s +0.15 mm): %s", cause, msg)
	}
}
