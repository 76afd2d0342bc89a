package db_test

import (
	"bytes"
	"context"
	"encoding/json"
	"testing"
	"time"

	"halfmark"
)

func TestRawDataAppendOnly(t *testing.T) {
	d := openTestDB(t)
	ctx := context.Background()
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: "Linac A"}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	fx, fy := 10.0, 10.0
	c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: time.Now().Add(-time.Hour),
		Setup: halfmark.Setup{FieldXcm: &fx, FieldYcm: &fy},
		Edges: []halfmark.EdgeResult{{Edge: "X1", PositionMM: 50.1}, {Edge: "X2", PositionMM: 49.9}}}
	st, _, err := d.RecordCheck(ctx, a, &c)
	if err != nil {
		t.Fatal(err)
	}
	csv := []byte("position_mm,signal\n-60,2\n0,100\n60,2\n")
	r := halfmark.RawData{CheckID: st.ID, Kind: halfmark.RawProfile, Filename: "x.csv", Content: csv,
		Analysis: json.RawMessage(`{"field_size_mm":100.0}`), AnalysisVersion: "profile/1"}
	if err := d.AttachRaw(ctx, a, &r); err != nil {
		t.Fatal(err)
	}
	got, err := d.Raw(ctx, r.ID)
	if err != nil || !bytes.Equal(got.Content, csv) || got.CheckID != st.ID || got.Kind != halfmark.RawProfile {
		t.Fatalf("Raw: %+v, %v", got, err)
	}
	var an map[string]float64
	if err := json.Unmarshal(got.Analysis, &an); err != nil || an["field_size_mm"] != 100 {
		t.Fatalf("analysis round trip: %s, %v", got.Analysis, err)
	}
	list, err := d.RawForCheck(ctx, st.ID)
	if err != nil || len(list) != 1 || list[0].Content != nil {
		t.Fatalf("RawForCheck: %+v, %v (content must be left out)", list, err)
	}
	if _, err := d.Pool.Exec(ctx, `UPDATE raw_data SET filename = 'y.csv'`); halfmark.ErrorCodeOf(mapErrForTest(err)) == "" {
		t.Fatal("UPDATE on raw_data was accepted; the table must be append-only")
	}
	if _, err := d.Pool.Exec(ctx, `DELETE FROM raw_data`); err == nil {
		t.Fatal("DELETE on raw_data was accepted")
	}
	bad := halfmark.RawData{CheckID: "0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60", Kind: "audio", Filename: "", Content: nil}
	err = d.AttachRaw(ctx, a, &bad)
	if he, ok := err.(*halfmark.Error); !ok || he.Code != halfmark.EInvalid || len(he.Fields) != 3 {
		t.Fatalf("bad raw: got %v; want EInvalid naming kind, filename and content", err)
	}
	bad = halfmark.RawData{CheckID: "0b8e3c2a-5d1f-4e8a-9a57-3f1c2d4e5f60", Kind: halfmark.RawImage, Filename: "a.dcm", Content: []byte{1}}
	if err := d.AttachRaw(ctx, a, &bad); halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
		t.Fatalf("unknown check: got %v; want EInvalid", err)
	}
	if _, err := d.Raw(ctx, 999); halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
		t.Fatalf("absent raw: got %v", err)
	}
}

func mapErrForTest(err error) error {
	if err == nil {
		return nil
	}
	return halfmark.Errorf(halfmark.EForbidden, "%v", err)
}
