package worker

import (
	"testing"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/analysis/tolerance"
	"halfmark/db"
)

// An MLC bank whose four leaves all sit 0.6 mm out, one of them 1.2 mm:
// bank mean (0.6·3 + 1.2)/4 = 0.75 mm (derived) is beyond the shipped
// example's bank-mean tolerance 0.5 mm (local choice) and inside its
// action limit 1.0 mm: Level 2, worst leaf B1P4 (residual +0.45 mm).
func TestEvaluateBatchBankAttribution(t *testing.T) {
	now := day0.AddDate(0, 0, 30)
	ss := leafSeries([]float64{0.6, 0.6, 0.6, 1.2}, 0.1)
	evs := EvaluateBatch(ss, tolerance.Shipped(), drift.Options{}, now)
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

// The bank check opens one alert of its own, on the worst leaf: with the
// bank above, leaves B1P1–B1P3 (0.6 mm, inside the 1 mm leaf tolerance)
// carry no Level 2, and B1P4 (1.2 mm, beyond it) carries both its own
// limit signal and the bank signal (mean 0.75 mm > 0.5 mm).
func TestBankCheckRaisesOneAlert(t *testing.T) {
	now := day0.AddDate(0, 0, 30)
	ss := leafSeries([]float64{0.6, 0.6, 0.6, 0.9}, 0.3)
	// Bank mean (0.6·3 + 0.9)/4 = 0.675 mm (derived): beyond 0.5, inside 1.0.
	evs := EvaluateBatch(ss, tolerance.Shipped(), drift.Options{}, now)
	bankSignals := 0
	for i, e := range evs {
		for _, sg := range e.Signals {
			if sg.Family == FamilyBank {
				bankSignals++
				if ss[i].Edge != "B1P4" || sg.Level != halfmark.LevelScheduled {
					t.Errorf("bank signal on %s at %v", ss[i].Edge, sg.Level)
				}
			}
		}
		if ss[i].Edge == "B1P4" && e.Level != halfmark.LevelScheduled {
			t.Errorf("worst leaf level %v, want Level 2 from the bank check", e.Level)
		}
		if ss[i].Edge != "B1P4" && e.Level >= halfmark.LevelScheduled {
			t.Errorf("%s raised to %v by the bank check", ss[i].Edge, e.Level)
		}
	}
	if bankSignals != 1 {
		t.Fatalf("%d bank signals, want 1", bankSignals)
	}
}

// A field that grows on both sides: X1 and X2 each 1.2 mm outward, inside
// the 2 mm edge tolerance of the morning check, but the field size
// X1 + X2 changes 2.4 mm, beyond the 2 mm field-size tolerance (AAPM TG-142
// daily collimator size indicator, seen in physics.md): one Level 2 pair
// alert, on one edge of the pair.
func TestPairCheckRaisesOneAlert(t *testing.T) {
	base, sigma := 50.0, 0.5
	now := day0.AddDate(0, 0, 30)
	var ss []db.EvalSeries
	for n, edge := range []string{"X1", "X2"} {
		s := db.EvalSeries{Series: halfmark.Series{ID: int64(n + 1), MachineID: 1, BeamID: 1, Geometry: "10×10 cm, iso",
			Edge: edge, Quantity: halfmark.QPosition}, BaselineValueMM: &base, BaselineSigmaMM: &sigma}
		for k := 0; k < 12; k++ {
			v := 50.0
			if k == 11 {
				v = 51.2
			}
			s.Times = append(s.Times, day0.AddDate(0, 0, k))
			s.ValuesMM = append(s.ValuesMM, v)
			s.Kinds = append(s.Kinds, halfmark.KindMorning)
		}
		ss = append(ss, s)
	}
	evs := EvaluateBatch(ss, tolerance.Shipped(), drift.Options{}, now)
	pairSignals, raised := 0, 0
	for _, e := range evs {
		for _, sg := range e.Signals {
			if sg.Family == FamilyPair {
				pairSignals++
				if sg.Level != halfmark.LevelScheduled {
					t.Errorf("pair signal level %v, want Level 2", sg.Level)
				}
			}
		}
		if e.Level == halfmark.LevelScheduled {
			raised++
		}
	}
	if pairSignals != 1 || raised != 1 {
		t.Fatalf("%d pair signals, %d series at Level 2; want one each", pairSignals, raised)
	}
}

// leafSeries builds bank 1 leaf series B1P1… with baseline 0 and the given
// σ: eleven points at 0, then each leaf's last value.
func leafSeries(lasts []float64, sigma float64) []db.EvalSeries {
	zero := 0.0
	var ss []db.EvalSeries
	for leaf, last := range lasts {
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
	return ss
}

// Jaw-pair checks against the shipped book: daily field size 2 mm (TG-142
// collimator size indicator, seen), monthly asymmetric 1 mm (secondary),
// centre offset 1 mm / 1.5 mm (local choice in the example).
func TestCheckPairShipped(t *testing.T) {
	b := tolerance.Shipped()
	for _, c := range []struct {
		d1, d2 float64
		kind   halfmark.CheckKind
		asym   bool
		want   halfmark.Level
	}{
		{1.0, 1.0, halfmark.KindMorning, false, halfmark.LevelInControl},  // ΔF = 2.0: on the limit is inside
		{1.3, 1.2, halfmark.KindMorning, false, halfmark.LevelScheduled},  // ΔF = 2.5 > 2
		{0.6, 0.6, halfmark.KindMonthly, true, halfmark.LevelScheduled},   // ΔF = 1.2 > 1 (asymmetric)
		{-1.6, 1.6, halfmark.KindMonthly, false, halfmark.LevelImmediate}, // Δc = 1.6 > 1.5
	} {
		pc := checkPair(drift.Attribute("X1", c.d1, "X2", c.d2, 0.1), "X1+X2", c.kind, c.asym, b)
		if pc.Level != c.want || pc.FieldSizeLimits == nil || pc.CentreLimits == nil {
			t.Errorf("d = (%v, %v) %s asym %v: level %d, want %d (%+v)", c.d1, c.d2, c.kind, c.asym, pc.Level, c.want, pc)
		}
	}
}
