package worker

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"halfmark"
	"halfmark/analysis/drift"
	"halfmark/db"
)

// attribute adds, to the details of jaw position series evaluated
// together, the pair attribution (field-size change against field shift),
// and to MLC position series the bank attribution (bank mean offset and
// worst leaf). Pairs and banks are formed within one beam and geometry.
func attribute(ss []db.EvalSeries, vs []drift.Verdict, evs []db.Evaluation, book halfmark.ToleranceBook) {
	type key struct {
		beam int64
		geom string
		edge string
	}
	byEdge := map[key]int{}
	type bankKey struct {
		beam int64
		geom string
		bank int
	}
	banks := map[bankKey][]int{}
	for i := range ss {
		if ss[i].Quantity != halfmark.QPosition || vs[i].DeviationMM == nil {
			continue
		}
		byEdge[key{ss[i].BeamID, ss[i].Geometry, ss[i].Edge}] = i
		if e, err := halfmark.ParseEdge(ss[i].Edge); err == nil && e.Jaw == "" {
			k := bankKey{ss[i].BeamID, ss[i].Geometry, e.Bank}
			banks[k] = append(banks[k], i)
		}
	}
	for k, i := range byEdge {
		if k.edge != "X1" && k.edge != "Y1" {
			continue
		}
		e, _ := halfmark.ParseEdge(k.edge)
		j, ok := byEdge[key{k.beam, k.geom, e.Partner().String()}]
		if !ok {
			continue
		}
		noise := 0.0
		for _, s := range []*float64{vs[i].SigmaMM, vs[j].SigmaMM} {
			if s != nil {
				noise = math.Max(noise, 2**s)
			}
		}
		a := drift.Attribute(ss[i].Edge, *vs[i].DeviationMM, ss[j].Edge, *vs[j].DeviationMM, noise)
		pc := checkPair(a, ss[i].Edge+"+"+ss[j].Edge, kindOf(&ss[i]), Asymmetric(&ss[i]) || Asymmetric(&ss[j]), book)
		for _, n := range []int{i, j} {
			if d, ok := evs[n].Details.(*Details); ok {
				d.Pair = pc
			}
		}
		if pc.Level > halfmark.LevelInControl {
			// The pair's signal goes on the edge that moved (the larger
			// deviation when both did): one alert per pair, on that series.
			n := i
			if a.Mover == ss[j].Edge || (a.Mover != ss[i].Edge && math.Abs(a.Dev2MM) > math.Abs(a.Dev1MM)) {
				n = j
			}
			raise(&evs[n], &ss[n], FamilyPair, pc.Level, pairRule(pc))
		}
	}
	for k, idx := range banks {
		leaves := make([]drift.LeafDeviation, len(idx))
		for n, i := range idx {
			leaves[n] = drift.LeafDeviation{Edge: ss[i].Edge, DeviationMM: *vs[i].DeviationMM}
		}
		b, ok := drift.AttributeBank(k.bank, leaves)
		if !ok {
			continue
		}
		bc := &BankCheck{BankAttribution: b}
		if l, ok := book.Limits(halfmark.QMLCBankMean, kindOf(&ss[idx[0]]), "B"+strconv.Itoa(k.bank), false); ok {
			bc.Limits = &l
			bc.Level = levelOf(b.MeanOffsetMM, l)
		}
		for _, i := range idx {
			if d, ok := evs[i].Details.(*Details); ok {
				d.Bank = bc
			}
		}
		if bc.Level > halfmark.LevelInControl {
			// A whole-bank offset is one alert, on the bank's worst leaf.
			for _, i := range idx {
				if ss[i].Edge == b.WorstLeaf {
					raise(&evs[i], &ss[i], FamilyBank, bc.Level, fmt.Sprintf("bank %d mean offset %+.2f mm over %d leaves beyond the bank-mean %s (%.2f mm); worst leaf %s %+.2f mm",
						b.Bank, b.MeanOffsetMM, b.Leaves, limitName(bc.Level), limitValue(bc.Level, *bc.Limits), b.WorstLeaf, b.WorstDevMM))
				}
			}
		}
	}
}

// Rule families of the combined checks, beside the single-series ones.
const (
	FamilyPair = "pair" // a jaw pair's field size or centre beyond its limits
	FamilyBank = "bank" // an MLC bank's mean offset beyond its limits
)

// raise adds a combined check's signal to one series' evaluation: its
// level becomes lvl and an alert of the family opens on it. When the
// series is already at that level by its own limits, its own alert says
// it and no second alert is opened for the same event.
func raise(e *db.Evaluation, s *db.EvalSeries, family string, lvl halfmark.Level, rule string) {
	if lvl <= e.Level {
		return
	}
	e.Level, e.Rule = lvl, rule
	e.BackInControl = false
	e.Signals = append(e.Signals, db.AlertSignal{Family: family, Rule: rule, Level: lvl,
		Message: fmt.Sprintf("%s, %s (%s): %s", s.MachineName, s.BeamLabel, s.Geometry, rule)})
}

func pairRule(pc *PairCheck) string {
	var parts []string
	if l := pc.FieldSizeLimits; l != nil && levelOf(pc.FieldSizeChangeMM, *l) > 0 {
		lv := levelOf(pc.FieldSizeChangeMM, *l)
		parts = append(parts, fmt.Sprintf("field size %s changed %+.2f mm, beyond the %s (%.2f mm)", pc.Edge1+"+"+pc.Edge2,
			pc.FieldSizeChangeMM, limitName(lv), limitValue(lv, *l)))
	}
	if l := pc.CentreLimits; l != nil && levelOf(pc.CentreShiftMM, *l) > 0 {
		lv := levelOf(pc.CentreShiftMM, *l)
		parts = append(parts, fmt.Sprintf("field centre (%s − %s)/2 shifted %+.2f mm, beyond the %s (%.2f mm)", pc.Edge2, pc.Edge1,
			pc.CentreShiftMM, limitName(lv), limitValue(lv, *l)))
	}
	if pc.Summary != "" {
		parts = append(parts, pc.Summary)
	}
	return strings.Join(parts, "; ")
}

func limitName(l halfmark.Level) string {
	if l >= halfmark.LevelImmediate {
		return "action limit"
	}
	return "tolerance"
}

func limitValue(l halfmark.Level, lim halfmark.Limits) float64 {
	if l >= halfmark.LevelImmediate {
		return lim.ActionMM
	}
	return lim.ToleranceMM
}

// PairCheck is a jaw pair's attribution judged against the book's
// field_size and centre_offset limits: Level 3 when |ΔF| or |Δc| is beyond
// its action limit, 2 beyond its tolerance (strict, as for edges).
type PairCheck struct {
	drift.PairAttribution
	FieldSizeLimits *halfmark.Limits `json:"field_size_limits,omitempty"`
	CentreLimits    *halfmark.Limits `json:"centre_offset_limits,omitempty"`
	Level           halfmark.Level   `json:"level"`
}

func checkPair(a drift.PairAttribution, pair string, kind halfmark.CheckKind, asym bool, book halfmark.ToleranceBook) *PairCheck {
	pc := &PairCheck{PairAttribution: a}
	for _, q := range []struct {
		q   halfmark.Quantity
		v   float64
		dst **halfmark.Limits
	}{{halfmark.QFieldSize, a.FieldSizeChangeMM, &pc.FieldSizeLimits}, {halfmark.QCentreOffset, a.CentreShiftMM, &pc.CentreLimits}} {
		l, ok := book.Limits(q.q, kind, pair, asym)
		if !ok {
			continue
		}
		*q.dst = &l
		pc.Level = max(pc.Level, levelOf(q.v, l))
	}
	return pc
}

// BankCheck is an MLC bank's attribution judged against the book's
// mlc_bank_mean limits.
type BankCheck struct {
	drift.BankAttribution
	Limits *halfmark.Limits `json:"bank_mean_limits,omitempty"`
	Level  halfmark.Level   `json:"level"`
}

// levelOf is the TG-142 level of a deviation d (mm) against limits l:
// 3 beyond the action limit, 2 beyond the tolerance (strict), else 0.
func levelOf(d float64, l halfmark.Limits) halfmark.Level {
	switch d = math.Abs(d); {
	case d > l.ActionMM:
		return halfmark.LevelImmediate
	case d > l.ToleranceMM:
		return halfmark.LevelScheduled
	}
	return halfmark.LevelInControl
}

func kindOf(s *db.EvalSeries) halfmark.CheckKind {
	if n := len(s.Kinds); n > 0 {
		return s.Kinds[n-1]
	}
	return halfmark.KindMorning
}
