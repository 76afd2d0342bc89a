package drift

import (
	"fmt"
	"math"
	"sort"
	"time"

	"halfmark"
	"halfmark/analysis/spc"
)

// MachineResult is the judgement of every series and every component of
// one machine.
type MachineResult struct {
	Series     []SeriesResult
	Components []ComponentResult
}

// PooledPoint is one session of a component's pooled chart. The
// statistics are causal: each uses only this and earlier sessions.
type PooledPoint struct {
	Time    time.Time      `json:"time"`  // the session's first measurement
	Views   int            `json:"views"` // views with a σ pooled here
	MM      float64        `json:"mm"`    // pooled deviation (bank mean, leaf residual), mm
	SEMM    float64        `json:"se_mm"` // its standard error, mm
	Z       float64        `json:"z"`     // MM/SEMM
	CPlus   float64        `json:"cusum_plus"`
	CMinus  float64        `json:"cusum_minus"` // one-sided sums in σ of Z
	EWMA    float64        `json:"ewma"`        // EWMA of Z
	EWMALim float64        `json:"ewma_limit"`  // ± limit of the EWMA of Z
	Level   halfmark.Level `json:"level"`       // the component's quantity against its limits this session
	Charted bool           `json:"charted"`     // false: no view had a σ yet (limits only)
	Flags   uint8          `json:"-"`
	Signals []string       `json:"signals,omitempty"`
}

// ComponentResult is the judgement of one physical component.
type ComponentResult struct {
	MachineID int64
	Component halfmark.Component
	Cadence   string // "daily" | "monthly"
	// Direction is +1 outward / wider, −1 inward / narrower (edge
	// convention), 0 when nothing changed.
	Direction int
	// Level is the worst of the evidence now; 0 = no finding. While a
	// signal's episode is open (fewer than Detection.ResolveSessions clean
	// sessions since the last flag) the level stays at least 1.
	Level halfmark.Level
	// Active: a finding should be open (or kept open) now.
	Active bool
	// BackInControl: the newest Detection.ResolveSessions sessions carry no
	// flag and the level is 0.
	BackInControl bool
	MagnitudeMM   float64
	MagnitudeCIMM [2]float64
	Onset         *time.Time
	Crossing      halfmark.FindingCrossing
	Evidence      []halfmark.Evidence
	Rules         []string
	Message       string
	Sessions      []PooledPoint

	// The chart design in force: k, h (σ of Z), Shewhart L, EWMA L, and the
	// number of components of the cadence it is widened for.
	CUSUMK, CUSUMH, ShewhartL, EWMAL float64
	FamilySize                       int
	// Limits apply to the component's own quantity (for jaws, penumbrae
	// and light fields: the strictest of its series').
	Limits *halfmark.Limits
	// Trend since the onset (nil: no open episode or too few sessions).
	Trend *TrendSummary
	// Pair is the jaw pair check that raised the level, if any.
	Pair *PairAttribution
}

// component is a component being built.
type component struct {
	comp    halfmark.Component
	members []int
	views   []view
	equal   bool // plain mean (bank) instead of inverse-variance weights
	limits  *halfmark.Limits
	sess    []session
	levels  []halfmark.Level // per session, from the limits
	cadence string
	kind    halfmark.CheckKind
}

// EvaluateMachine judges every series of one machine and every component
// they see (halfmark.ComponentsOf). Series of different methods keep their
// own baselines and feed the same component. Each component gets one
// pooled statistic per session (UTC calendar day): the inverse-variance
// weighted mean of its views' deviations (an MLC bank: the mean over its
// leaves; a leaf: its residual after the bank mean of the day), charted
// standardised with a two-sided CUSUM and a Shewhart chart, widened for the
// components of the same cadence (Detection, familyDesign), and an EWMA
// that is drawn and alerts only when Detection.EWMAAlerts.
func EvaluateMachine(series []SeriesInput, book halfmark.ToleranceBook, d Detection, now time.Time) (MachineResult, error) {
	var res MachineResult
	if err := d.Validate(); err != nil {
		return res, err
	}
	if book == nil {
		return res, fmt.Errorf("drift: no tolerance book; load one before evaluating")
	}
	// Per-series families: series of the same cadence on the machine.
	cad := make([]string, len(series))
	fam := map[string]int{}
	for i := range series {
		cad[i] = seriesCadence(&series[i], d)
		fam[cad[i]]++
	}
	ps := make([]*prepared, len(series))
	res.Series = make([]SeriesResult, len(series))
	for i := range series {
		s := series[i]
		if s.FamilySize == 0 {
			s.FamilySize = fam[cad[i]]
		}
		ps[i] = prepare(&s, book, d, now)
		ps[i].in = &series[i]
		res.Series[i] = ps[i].res
	}
	comps := buildComponents(ps, book, d)
	count := map[string]int{}
	for _, c := range comps {
		count[c.cadence]++
	}
	for _, c := range comps {
		res.Components = append(res.Components, judge(c, ps, book, d, count[c.cadence], now))
	}
	pairChecks(res.Components, ps, book)
	for i := range res.Components {
		finish(&res.Components[i], ps, d)
	}
	return res, nil
}

// seriesCadence: daily when the median gap between its days is at most
// Detection.DailyMaxGapDays.
func seriesCadence(s *SeriesInput, d Detection) string {
	var days []time.Time
	for _, t := range s.Times {
		if dd := dayOf(t); len(days) == 0 || !days[len(days)-1].Equal(dd) {
			days = append(days, dd)
		}
	}
	if medianGapDays(days) <= d.DailyMaxGapDays {
		return CadenceDaily
	}
	return CadenceMonthly
}

func buildComponents(ps []*prepared, book halfmark.ToleranceBook, d Detection) []*component {
	byKey := map[halfmark.Component]*component{}
	var order []*component
	get := func(c halfmark.Component) *component {
		if x, ok := byKey[c]; ok {
			return x
		}
		x := &component{comp: c}
		byKey[c] = x
		order = append(order, x)
		return x
	}
	type bankDay struct {
		bank string
		day  time.Time
	}
	type agg struct {
		sumAll, sumSig, s2 float64
		nAll, nSig         int
	}
	bankAgg := map[bankDay]*agg{}
	for i, p := range ps {
		s := p.in
		for _, c := range halfmark.ComponentsOf(s.Quantity, s.Edge, s.BeamLabel) {
			x := get(c)
			x.members = append(x.members, i)
			if p.err != nil || !p.hasCentre {
				continue
			}
			switch c.Kind {
			case halfmark.ComponentMLCLeaf:
				// residual views are added below, once the bank means are known
			case halfmark.ComponentMLCBank:
				x.equal = true
				for j, t := range p.times {
					x.views = append(x.views, view{series: i, at: t, devMM: p.dev[j], sigma: p.sigma})
					k := bankDay{c.Name, dayOf(t)}
					a := bankAgg[k]
					if a == nil {
						a = &agg{}
						bankAgg[k] = a
					}
					a.sumAll += p.dev[j]
					a.nAll++
					if p.sigma > 0 {
						a.sumSig += p.dev[j]
						a.s2 += p.sigma * p.sigma
						a.nSig++
					}
				}
			default:
				for j, t := range p.times {
					v := view{series: i, at: t, devMM: p.dev[j], sigma: p.sigma}
					if p.limits != nil {
						v.level = LevelOf(v.devMM, *p.limits)
					}
					x.views = append(x.views, v)
				}
			}
		}
	}
	// Leaf residuals after the bank mean of the same day:
	//   r_i = d_i − d̄,  Var r_i = σ_i²(1 − 2/n) + Σσ_j²/n²
	for _, x := range order {
		if x.comp.Kind != halfmark.ComponentMLCLeaf {
			continue
		}
		e, _ := halfmark.ParseEdge(x.comp.Name)
		bank := fmt.Sprintf("bank %d", e.Bank)
		for _, i := range x.members {
			p := ps[i]
			if p.err != nil || !p.hasCentre {
				continue
			}
			for j, t := range p.times {
				a := bankAgg[bankDay{bank, dayOf(t)}]
				if a == nil || a.nAll < 2 {
					continue
				}
				v := view{series: i, at: t, devMM: p.dev[j] - a.sumAll/float64(a.nAll)}
				if p.sigma > 0 && a.nSig >= 2 {
					n := float64(a.nSig)
					v.devMM = p.dev[j] - a.sumSig/n
					v.sigma = math.Sqrt(p.sigma*p.sigma*(1-2/n) + a.s2/(n*n))
				}
				x.views = append(x.views, v)
			}
		}
	}
	for _, x := range order {
		x.kind = halfmark.KindMorning
		var newest time.Time
		for _, i := range x.members {
			p := ps[i]
			if n := len(p.times); n > 0 && !p.times[n-1].Before(newest) {
				newest, x.kind = p.times[n-1], p.kind
			}
		}
		switch x.comp.Kind {
		case halfmark.ComponentMLCBank:
			if l, ok := book.Limits(QMLCBankMean, x.kind, "B"+x.comp.Name[len(x.comp.Name)-1:], false); ok {
				x.limits = &l
			}
		case halfmark.ComponentMLCLeaf:
			if l, ok := book.Limits(QMLCLeaf, x.kind, x.comp.Name, false); ok {
				x.limits = &l
			}
		default:
			for _, i := range x.members {
				if l := ps[i].limits; l != nil && (x.limits == nil || l.ToleranceMM < x.limits.ToleranceMM) {
					x.limits = l
				}
			}
		}
		x.sess = sessionsOf(x.views)
		x.levels = make([]halfmark.Level, len(x.sess))
		for si, s := range x.sess {
			switch x.comp.Kind {
			case halfmark.ComponentMLCBank, halfmark.ComponentMLCLeaf:
				if x.limits == nil {
					continue
				}
				var sum float64
				for _, v := range s.views {
					sum += v.devMM
				}
				x.levels[si] = LevelOf(sum/float64(len(s.views)), *x.limits)
			default:
				for _, v := range s.views {
					x.levels[si] = max(x.levels[si], v.level)
				}
			}
		}
		days := make([]time.Time, len(x.sess))
		for i, s := range x.sess {
			days[i] = s.day
		}
		x.cadence = CadenceMonthly
		if medianGapDays(days) <= d.DailyMaxGapDays {
			x.cadence = CadenceDaily
		}
	}
	// Components nobody measured yet are not judged.
	out := order[:0]
	for _, x := range order {
		if len(x.sess) > 0 {
			out = append(out, x)
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return kindRank(out[i].comp.Kind) < kindRank(out[j].comp.Kind) })
	return out
}

func kindRank(k halfmark.ComponentKind) int {
	for i, v := range halfmark.ComponentKinds {
		if v == k {
			return i
		}
	}
	return len(halfmark.ComponentKinds)
}

// judge charts one component and sets its level, onset, trend and
// crossing.
func judge(x *component, ps []*prepared, book halfmark.ToleranceBook, d Detection, m int, now time.Time) ComponentResult {
	cd := d.familyDesign(x.cadence, m)
	if se := typicalSE(x, d); se > 0 && x.limits != nil && x.limits.ToleranceMM > 0 && d.MinChangeFraction > 0 {
		// The smallest change worth a finding sets a floor under k
		// (in mm: half of MinChangeFraction × tolerance).
		if kmin := d.MinChangeFraction * x.limits.ToleranceMM / (2 * se); kmin > cd.K {
			cd.K = kmin
			cd.H = siegmundH(cd.K, 2*cd.AC)
		}
		cd.minChangeMM = d.MinChangeFraction * x.limits.ToleranceMM
	}
	if e := estimationOf(x, ps, d); d.EstimatedCorrection && !e.none() {
		cd.H, cd.L = cachedCorrected(cd.K, cd.AC, e)
		if d.EWMAAlerts {
			cd.EWMAL = cd.L
		}
	}
	r := ComponentResult{Component: x.comp, Cadence: x.cadence, Limits: x.limits,
		CUSUMK: cd.K, CUSUMH: cd.H, ShewhartL: cd.L, EWMAL: cd.EWMAL, FamilySize: m}
	if len(x.members) > 0 {
		r.MachineID = ps[x.members[0]].in.MachineID
	}
	r.Sessions = chartSessions(x, cd, d)
	n := len(r.Sessions)
	newest := &r.Sessions[n-1]

	// Levels 2 and 3: the component's own quantity against its limits.
	switch x.comp.Kind {
	case halfmark.ComponentMLCBank, halfmark.ComponentMLCLeaf:
		r.Level = newest.Level
	default:
		// The largest deviation over its series (each series' newest
		// point against that series' limits).
		for _, i := range x.members {
			p := ps[i]
			if p.err == nil && p.hasCentre && p.limits != nil && len(p.dev) > 0 {
				r.Level = max(r.Level, LevelOf(p.dev[len(p.dev)-1], *p.limits))
			}
		}
	}
	if r.Level >= halfmark.LevelScheduled {
		r.Rules = append(r.Rules, FamilyLimit)
	}
	stat := false
	for _, f := range []struct {
		flag uint8
		name string
	}{{FlagShewhart, FamilyShewhart}, {FlagCUSUM, FamilyCUSUM}, {FlagEWMA, FamilyEWMA}} {
		if newest.Flags&f.flag != 0 {
			r.Rules = append(r.Rules, f.name)
			stat = true
		}
	}
	if stat {
		r.Level = max(r.Level, halfmark.LevelInspect)
	}

	// The episode: from the first flag after the last clean run of
	// ResolveSessions sessions.
	last := -1
	for i := n - 1; i >= 0; i-- {
		if r.Sessions[i].Flags != 0 {
			last = i
			break
		}
	}
	open := last >= 0 && n-1-last < d.ResolveSessions
	r.Direction = sign(newest.MM)
	if open {
		start := last
		for i, clean := last-1, 0; i >= 0; i-- {
			if r.Sessions[i].Flags == 0 {
				clean++
				if clean >= d.ResolveSessions {
					break
				}
				continue
			}
			clean, start = 0, i
		}
		oi, dir := onset(r.Sessions, start, last)
		if dir != 0 {
			r.Direction = dir
		}
		t := r.Sessions[oi].Time
		r.Onset = &t
		trendSince(&r, oi, d, now)
		if r.Level == halfmark.LevelInControl {
			r.Level = halfmark.LevelInspect // still inspected until the component is back in control
		}
		if len(r.Rules) == 0 {
			// Quiet now but not yet back in control: the rules of the episode.
			for _, p := range r.Sessions[start : last+1] {
				for _, f := range p.Signals {
					r.Rules = appendUnique(r.Rules, f)
				}
			}
		}
	} else {
		r.MagnitudeMM = newest.MM
		r.MagnitudeCIMM = [2]float64{newest.MM - 1.96*newest.SEMM, newest.MM + 1.96*newest.SEMM}
		r.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingNotSignificant}
		if r.Level >= halfmark.LevelScheduled {
			r.Crossing.Status = halfmark.CrossingAlreadyBeyond
		}
	}
	if r.Level >= halfmark.LevelScheduled {
		r.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingAlreadyBeyond}
		r.Direction = sign(r.MagnitudeMM)
	}
	r.Active = r.Level > halfmark.LevelInControl
	r.BackInControl = !r.Active
	return r
}

// chartSessions pools each session and runs the charts on the pooled z:
//
//	z_s = x̄_s / SE(x̄_s)
//	C+_s = max(0, C+_(s−1) + z_s − k),  C−_s = max(0, C−_(s−1) − z_s − k)   (Page 1954)
//	EWMA e_s = λ z_s + (1 − λ) e_(s−1),  limit L·sqrt(λ/(2 − λ)·(1 − (1 − λ)^(2s)))
//
// Flags: Shewhart |z| > L, CUSUM C± > h, EWMA beyond its limit (only when
// it alerts), limit when the session's level is 2 or more. Sessions with no
// σ yet are kept for the limits and skipped by the charts.
func chartSessions(x *component, cd chartDesign, d Detection) []PooledPoint {
	out := make([]PooledPoint, len(x.sess))
	var cp, cm, ew, decay float64 = 0, 0, 0, 1
	lam := d.EWMALambda
	for i, s := range x.sess {
		p := &out[i]
		p.Time, p.Level = s.views[0].at, x.levels[i]
		var mean, se float64
		var n int
		var ok bool
		if x.equal {
			mean, se, n, ok = poolEqual(s.views, d.ViewCorrelation)
		} else {
			mean, se, n, ok = poolWeighted(s.views, d.ViewCorrelation)
		}
		if !ok || se <= 0 {
			var sum float64
			for _, v := range s.views {
				sum += v.devMM
			}
			p.MM = sum / float64(len(s.views))
		} else {
			p.Charted, p.MM, p.SEMM, p.Views = true, mean, se, n
			p.Z = mean / se
			k := math.Max(cd.K, cd.minChangeMM/(2*se))
			cp = math.Max(0, cp+p.Z-k)
			cm = math.Max(0, cm-p.Z-k)
			ew = lam*p.Z + (1-lam)*ew
			decay *= (1 - lam) * (1 - lam)
			p.EWMALim = cd.EWMAL * math.Sqrt(lam/(2-lam)*(1-decay))
			if math.Abs(p.Z) > cd.L {
				p.Flags |= FlagShewhart
			}
			if cp > cd.H || cm > cd.H {
				p.Flags |= FlagCUSUM
			}
			if d.EWMAAlerts && math.Abs(ew) > p.EWMALim {
				p.Flags |= FlagEWMA
			}
		}
		p.CPlus, p.CMinus, p.EWMA = cp, cm, ew
		if p.Level >= halfmark.LevelScheduled {
			p.Flags |= FlagLimit
		}
		p.Signals = flagNames(p.Flags)
	}
	return out
}

// onset estimates when the change of an episode began: for a CUSUM signal,
// the session after the last one at which the signalling one-sided sum was
// zero (Montgomery, Introduction to Statistical Quality Control, §9.1: the
// N± counter); otherwise the episode's first flagged session. dir is the
// direction of the change (+1 up, −1 down, 0 unknown).
func onset(ss []PooledPoint, start, last int) (idx, dir int) {
	for i := start; i <= last; i++ {
		if ss[i].Flags&FlagCUSUM == 0 {
			continue
		}
		up := ss[i].CPlus >= ss[i].CMinus
		j := i
		for j > 0 {
			c := ss[j-1].CMinus
			if up {
				c = ss[j-1].CPlus
			}
			if c == 0 && ss[j-1].Charted {
				break
			}
			j--
		}
		if up {
			return j, 1
		}
		return j, -1
	}
	return start, sign(ss[start].MM)
}

func sign(v float64) int {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

// trendSince fits the trend on the charted sessions since the onset only
// (Theil–Sen with Sen's 1968 interval, spc.TrendTimes), sets the magnitude
// and its 95% interval, and states the crossing:
//
//   - already_beyond when the component is beyond its tolerance (no date);
//   - not_significant when the slope's interval includes zero, the slope is
//     known to worse than Detection.ProjectionMaxRelCI, or the line moves
//     away from the limit;
//   - beyond_horizon when the line reaches the tolerance after
//     now + Detection.HorizonDays;
//   - projected otherwise: the date where the line reaches the tolerance,
//     with the interval from the slope's 95% bounds (the line through the
//     newest fitted value), and a Level-1 signal ("trend").
func trendSince(r *ComponentResult, oi int, d Detection, now time.Time) {
	var ts []time.Time
	var ys []float64
	var sw, swy float64
	for _, p := range r.Sessions[oi:] {
		if !p.Charted {
			continue
		}
		ts = append(ts, p.Time)
		ys = append(ys, p.MM)
		w := 1 / (p.SEMM * p.SEMM)
		sw += w
		swy += w * p.MM
	}
	r.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingNotSignificant}
	if sw > 0 {
		r.MagnitudeMM = swy / sw
		h := 1.96 / math.Sqrt(sw)
		r.MagnitudeCIMM = [2]float64{r.MagnitudeMM - h, r.MagnitudeMM + h}
	}
	if len(ts) < d.TrendMinSessions || !ts[len(ts)-1].After(ts[0]) {
		return
	}
	tr, err := spc.TrendTimes(ts, ys, spc.TrendOptions{Method: spc.TheilSen})
	if err != nil {
		return
	}
	lastT := ts[len(ts)-1]
	yL := tr.ValueAt(tr.Day(lastT))
	s := &TrendSummary{Method: string(tr.Method), Points: len(ts), SlopePer30d: tr.SlopePer30d, CILow: tr.CILow, CIHigh: tr.CIHigh,
		Significant: tr.Significant, FittedFirst: tr.ValueAt(0), FittedLast: yL, From: ts[0]}
	r.Trend = s
	if !tr.Significant {
		return
	}
	// Magnitude: the line at the newest session; its interval from the
	// slope's bounds about the middle of the fit and the mean's error.
	mid := ts[len(ts)/2]
	dt := lastT.Sub(mid).Hours() / 24
	half := math.Hypot(1.96/math.Sqrt(sw), (tr.CIHigh-tr.CILow)/2/30*dt)
	r.MagnitudeMM = yL
	r.MagnitudeCIMM = [2]float64{yL - half, yL + half}
	if r.Limits == nil || r.Level >= halfmark.LevelScheduled {
		return
	}
	rel := (tr.CIHigh - tr.CILow) / 2 / math.Abs(tr.SlopePer30d)
	if rel > d.ProjectionMaxRelCI {
		return
	}
	slope := tr.SlopePerDay
	dir := sign(slope)
	if dir == 0 || sign(yL) == -dir { // flat, or heading back toward the baseline
		return
	}
	horizon := now.Add(time.Duration(d.HorizonDays * float64(24*time.Hour)))
	at := func(limit, sl float64) time.Time {
		lim := float64(dir) * limit
		days := (lim - yL) / sl
		if days < 0 {
			days = 0
		}
		if days > 200*365 {
			days = 200 * 365
		}
		return lastT.Add(time.Duration(days * float64(24*time.Hour)))
	}
	tol := at(r.Limits.ToleranceMM, slope)
	if tol.After(horizon) {
		r.Crossing.Status = halfmark.CrossingBeyondHorizon
		return
	}
	slo, shi := tr.CILow/30, tr.CIHigh/30
	if dir < 0 {
		slo, shi = shi, slo
	}
	early, late := at(r.Limits.ToleranceMM, shi), at(r.Limits.ToleranceMM, slo)
	r.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingProjected, ToleranceDate: &tol,
		ToleranceInterval: [2]*time.Time{&early, &late}}
	if r.Limits.ActionMM > 0 {
		if a := at(r.Limits.ActionMM, slope); !a.After(horizon) {
			r.Crossing.ActionDate = &a
		}
	}
	r.Level = max(r.Level, halfmark.LevelInspect)
	r.Rules = appendUnique(r.Rules, FamilyTrend)
	r.Direction = dir
}

// estimationOf is the estimation error of a component's pooled z, from the
// views of its newest session with a σ (estimated.go).
func estimationOf(x *component, ps []*prepared, d Detection) estimationError {
	var e estimationError
	for si := len(x.sess) - 1; si >= 0; si-- {
		var tot float64
		for _, v := range x.sess[si].views {
			if v.sigma > 0 {
				tot += share(x, v)
			}
		}
		if tot == 0 {
			continue
		}
		var a2 float64
		for _, v := range x.sess[si].views {
			if v.sigma <= 0 {
				continue
			}
			a := share(x, v) / tot
			p := ps[v.series]
			if p.estimated {
				e.vb += a / float64(d.BaselinePoints)
			}
			if p.estSigma {
				a2 += a * a
			}
		}
		e.sdEps = 2 * cvSigmaHat(d.BaselinePoints) * math.Sqrt(a2)
		return e
	}
	return e
}

// share is a view's unnormalised share of the pooled variance: w²σ² = 1/σ²
// for inverse-variance weights, σ² for a plain mean.
func share(x *component, v view) float64 {
	if x.equal {
		return v.sigma * v.sigma
	}
	return 1 / (v.sigma * v.sigma)
}

// typicalSE is the standard error (mm) of the component's newest charted
// session.
func typicalSE(x *component, d Detection) float64 {
	for i := len(x.sess) - 1; i >= 0; i-- {
		var se float64
		var ok bool
		if x.equal {
			_, se, _, ok = poolEqual(x.sess[i].views, d.ViewCorrelation)
		} else {
			_, se, _, ok = poolWeighted(x.sess[i].views, d.ViewCorrelation)
		}
		if ok && se > 0 {
			return se
		}
	}
	return 0
}
