package drift

import (
	"fmt"
	"math"
)

// PairAttribution splits the deviations of a jaw pair (or an MLC leaf
// pair) into a field-size change and a field shift. Edge positions follow
// Halfmark's convention: distance from the axis, positive on the edge's own
// side, so for deviations d1 (X1) and d2 (X2) from baseline
//
//	ΔF = d1 + d2          field-size change, mm (positive: the field opens)
//	Δc = (d2 − d1)/2      centre shift, mm (positive: toward X2 / Y2 / bank 2)
//
// (field size = distance between the 50% points, IEC 60976; centre = mean
// of the two 50% positions; common practice). The edge that moves is the
// one carrying at least twice the other's |deviation|; comparable
// deviations of the same sign are a size change, of opposite sign a shift.
type PairAttribution struct {
	Edge1             string  `json:"edge1"`
	Edge2             string  `json:"edge2"`
	Dev1MM            float64 `json:"deviation1_mm"`
	Dev2MM            float64 `json:"deviation2_mm"`
	FieldSizeChangeMM float64 `json:"field_size_change_mm"`
	CentreShiftMM     float64 `json:"centre_shift_mm"`
	Mover             string  `json:"mover"` // an edge name, "both" or "" when nothing moved
	Summary           string  `json:"summary"`
}

// Attribute combines the latest deviations (mm) of two paired edges.
// noise (mm, ≥ 0) is the size below which a deviation counts as no
// movement, e.g. 2σ of the series.
func Attribute(edge1 string, dev1 float64, edge2 string, dev2 float64, noise float64) PairAttribution {
	a := PairAttribution{Edge1: edge1, Edge2: edge2, Dev1MM: dev1, Dev2MM: dev2,
		FieldSizeChangeMM: dev1 + dev2, CentreShiftMM: (dev2 - dev1) / 2}
	a1, a2 := math.Abs(dev1), math.Abs(dev2)
	switch {
	case a1 <= noise && a2 <= noise:
		a.Summary = fmt.Sprintf("%s and %s are within %.2f mm of their baselines", edge1, edge2, noise)
		return a
	case a1 >= 2*a2:
		a.Mover = edge1
	case a2 >= 2*a1:
		a.Mover = edge2
	default:
		a.Mover = "both"
	}
	switch {
	case a.Mover != "both":
		d := dev1
		if a.Mover == edge2 {
			d = dev2
		}
		dir := "outward"
		if d < 0 {
			dir = "inward"
		}
		a.Summary = fmt.Sprintf("%s moved %.2f mm %s: field size %+.2f mm, centre %+.2f mm", a.Mover, math.Abs(d), dir, a.FieldSizeChangeMM, a.CentreShiftMM)
	case (dev1 > 0) == (dev2 > 0):
		a.Summary = fmt.Sprintf("both edges moved %s: field size change %+.2f mm (centre %+.2f mm)", map[bool]string{true: "outward", false: "inward"}[dev1 > 0], a.FieldSizeChangeMM, a.CentreShiftMM)
	default:
		a.Summary = fmt.Sprintf("the field shifted %.2f mm toward %s (field size %+.2f mm)", math.Abs(a.CentreShiftMM), map[bool]string{true: edge2, false: edge1}[a.CentreShiftMM > 0], a.FieldSizeChangeMM)
	}
	return a
}

// LeafDeviation is one MLC leaf end's latest deviation from baseline, mm.
type LeafDeviation struct {
	Edge        string
	DeviationMM float64
}

// BankAttribution summarises one MLC bank:
//
//	mean offset = (1/n)·Σ d_i            a whole-bank (carriage or calibration) offset
//	worst leaf  = argmax_i |d_i − mean|  the leaf that moves on its own
//
// (common practice for picket-fence analysis: a bank-wide offset and a
// residual per leaf; Chui, Spirou and LoSasso, Med Phys 23:635, 1996 — from
// memory).
type BankAttribution struct {
	Bank          int     `json:"bank"`
	Leaves        int     `json:"leaves"`
	MeanOffsetMM  float64 `json:"mean_offset_mm"`
	WorstLeaf     string  `json:"worst_leaf"`
	WorstDevMM    float64 `json:"worst_deviation_mm"` // that leaf's deviation from baseline
	WorstResidual float64 `json:"worst_residual_mm"`  // its deviation minus the bank mean
}

// AttributeBank summarises a bank's leaves; ok is false for no leaves.
func AttributeBank(bank int, leaves []LeafDeviation) (b BankAttribution, ok bool) {
	b.Bank, b.Leaves = bank, len(leaves)
	if len(leaves) == 0 {
		return b, false
	}
	var sum float64
	for _, l := range leaves {
		sum += l.DeviationMM
	}
	b.MeanOffsetMM = sum / float64(len(leaves))
	worst := -1.0
	for _, l := range leaves {
		if r := math.Abs(l.DeviationMM - b.MeanOffsetMM); r > worst {
			worst, b.WorstLeaf, b.WorstDevMM, b.WorstResidual = r, l.Edge, l.DeviationMM, l.DeviationMM-b.MeanOffsetMM
		}
	}
	return b, true
}
