package drift

import "testing"

// Field size = X1 + X2 and centre = (X2 − X1)/2 (halfmark edge convention;
// IEC 60976 field size between 50% points, common practice); the expected
// values below follow by arithmetic.
func TestAttribute(t *testing.T) {
	for _, c := range []struct {
		d1, d2, size, shift float64
		mover               string
	}{
		{1, 0, 1, -0.5, "X1"},
		{0.1, -1.2, -1.1, -0.65, "X2"},
		{0.5, 0.5, 1, 0, "both"},
		{-0.5, 0.5, 0, 0.5, "both"},
		{0.05, -0.05, 0, -0.05, ""},
	} {
		a := Attribute("X1", c.d1, "X2", c.d2, 0.1)
		near(t, "size change", a.FieldSizeChangeMM, c.size, 1e-12)
		near(t, "centre shift", a.CentreShiftMM, c.shift, 1e-12)
		if a.Mover != c.mover || a.Summary == "" {
			t.Errorf("d = (%v, %v): mover %q (%s), want %q", c.d1, c.d2, a.Mover, a.Summary, c.mover)
		}
	}
}

func TestAttributeBank(t *testing.T) {
	b, ok := AttributeBank(1, []LeafDeviation{{"B1P1", 0.2}, {"B1P2", 0.2}, {"B1P3", 1.0}, {"B1P4", 0.2}})
	if !ok {
		t.Fatal("no attribution")
	}
	near(t, "mean offset", b.MeanOffsetMM, 0.4, 1e-12) // (0.2·3 + 1)/4, derived
	near(t, "worst residual", b.WorstResidual, 0.6, 1e-12)
	if b.WorstLeaf != "B1P3" {
		t.Errorf("worst leaf %s, want B1P3", b.WorstLeaf)
	}
	if _, ok := AttributeBank(2, nil); ok {
		t.Error("attribution of an empty bank")
	}
}
