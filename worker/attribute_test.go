package worker

import (
	"testing"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/db"
)

// An MLC bank whose four leaves all sit 0.6 mm out, one of them 1.2 mm:
// bank mean (0.6·3 + 1.2)/4 = 0.75 mm (derived) is beyond the shipped
// example's bank-mean tolerance 0.5 mm (local choice) and inside its
// action limit 1.0 mm: Level 2, worst leaf B1P4 (residual +0.45 mm).
func TestEvaluateBatchBankAttribution(t *testing.T) {
	zero, sigma := 0.0, 0.1
	now := day0.AddDate(0, 0, 30)
	var ss []db.EvalSeries
	for leaf, last := range []float64{0.6, 0.6, 0.6, 1.2} {
		s := db.EvalSeries{Series: halfmark.Series{ID: int64(leaf + 1), MachineID: 1, BeamID: 1, Geometry: "picket fence",
			Edge: "B1P" + itoa(int64(leaf+1)), Quantity: halfmark.QPosition},
			BaselineValueMM: &zero, BaselineSigmaMM: &sigma}
		for k := 0; k < 12; k++ {
			v := 0.0
			if k == 11 {
				v = last
			}
			s.Times = append(s.Times, day0.AddDate(0, 0, k))
			s.ValuesMM = append(s.ValuesMM, v)
			s.Kinds = append(s.Kinds, halfmark.KindMonthly)
		}
		ss = append(ss, s)
	}
	evs := EvaluateBatch(ss, ShippedTolerances(), drift.Options{}, now)
	for i, e := range evs {
		d := e.Details.(*Details)
		if d.Bank == nil || d.Bank.Level != halfmark.LevelScheduled || d.Bank.WorstLeaf != "B1P4" {
			t.Fatalf("series %d: bank check %+v", i, d.Bank)
		}
		near := func(what string, got, want float64) {
			if got-want > 1e-12 || want-got > 1e-12 {
				t.Errorf("%s = %v, want %v", what, got, want)
			}
		}
		near("bank mean", d.Bank.MeanOffsetMM, 0.75)
		near("worst residual", d.Bank.WorstResidual, 0.45)
		if d.Limits == nil || d.Limits.ToleranceMM != 1 { // MLC leaf position 1 mm (TG-142, from memory)
			t.Errorf("leaf limits %+v, want the 1 mm leaf tolerance", d.Limits)
		}
	}
}
