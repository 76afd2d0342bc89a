package drift

import (
	"fmt"
	"math"
	"strings"

	"halfmark"
)

// pairChecks judges each jaw pair (X1+X2, Y1+Y2) of one beam, setup and
// method on its newest deviations: the field-size change and the centre
// shift against the book's field_size and centre_offset limits
// (Attribute). A pair beyond a limit raises the component of the jaw that
// moved (the larger |deviation| when both did) to that level.
func pairChecks(cs []ComponentResult, ps []*prepared, book halfmark.ToleranceBook) {
	type key struct {
		beam       int64
		geom, edge string
		method     halfmark.Method
	}
	byEdge := map[key]int{}
	for i, p := range ps {
		if p.in.Quantity == halfmark.QPosition && p.err == nil && p.hasCentre && len(p.dev) > 0 {
			byEdge[key{p.in.BeamID, p.in.Geometry, p.in.Edge, p.in.Method}] = i
		}
	}
	jaw := map[string]*ComponentResult{}
	for i := range cs {
		if cs[i].Component.Kind == halfmark.ComponentJaw {
			jaw[cs[i].Component.Name] = &cs[i]
		}
	}
	for k, i := range byEdge {
		if k.edge != "X1" && k.edge != "Y1" {
			continue
		}
		e, _ := halfmark.ParseEdge(k.edge)
		pk := k
		pk.edge = e.Partner().String()
		j, ok := byEdge[pk]
		if !ok {
			continue
		}
		a, b := ps[i], ps[j]
		noise := 2 * math.Max(a.sigma, b.sigma)
		at := Attribute(a.in.Edge, a.dev[len(a.dev)-1], b.in.Edge, b.dev[len(b.dev)-1], noise)
		asym := a.asym || b.asym
		lvl := halfmark.LevelInControl
		var why []string
		for _, q := range []struct {
			q    halfmark.Quantity
			v    float64
			name string
		}{{QFieldSize, at.FieldSizeChangeMM, "field size"}, {QCentreOffset, at.CentreShiftMM, "field centre"}} {
			l, ok := book.Limits(q.q, a.kind, a.in.Edge+"+"+b.in.Edge, asym)
			if !ok {
				continue
			}
			if lv := LevelOf(q.v, l); lv > halfmark.LevelInControl {
				lvl = max(lvl, lv)
				why = append(why, fmt.Sprintf("%s changed %+.2f mm (tolerance %.2f mm, action %.2f mm)", q.name, q.v, l.ToleranceMM, l.ActionMM))
			}
		}
		if lvl == halfmark.LevelInControl {
			continue
		}
		mover := at.Mover
		if mover != a.in.Edge && mover != b.in.Edge {
			mover = a.in.Edge
			if math.Abs(at.Dev2MM) > math.Abs(at.Dev1MM) {
				mover = b.in.Edge
			}
		}
		c := jaw[mover]
		if c == nil || lvl <= c.Level {
			continue
		}
		c.Level = lvl
		c.Active, c.BackInControl = true, false
		c.Rules = appendUnique(c.Rules, FamilyLimit)
		at.Summary = fmt.Sprintf("%s, %s (%s): %s; %s", a.in.BeamLabel, a.in.Geometry, a.in.Method, strings.Join(why, "; "), at.Summary)
		c.Pair = &at
		c.Crossing = halfmark.FindingCrossing{Status: halfmark.CrossingAlreadyBeyond}
		if md := at.Dev1MM; mover == b.in.Edge {
			c.MagnitudeMM = at.Dev2MM
			c.Direction = sign(at.Dev2MM)
		} else {
			c.MagnitudeMM = md
			c.Direction = sign(md)
		}
	}
}

// finish lists the evidence and writes the message of a component with a
// level.
func finish(c *ComponentResult, ps []*prepared, d Detection) {
	if c.Level == halfmark.LevelInControl {
		c.Evidence, c.Rules = nil, nil
		return
	}
	byName := map[halfmark.Component][]int{}
	for i, p := range ps {
		for _, k := range halfmark.ComponentsOf(p.in.Quantity, p.in.Edge, p.in.BeamLabel) {
			byName[k] = append(byName[k], i)
		}
	}
	for _, i := range byName[c.Component] {
		p := ps[i]
		if p.err != nil {
			continue
		}
		var rules []string
		for _, sg := range p.res.Signals {
			if c.Component.Kind == halfmark.ComponentMLCLeaf && sg.Family == FamilyLimit {
				continue // a leaf is judged on its residual, not its own position
			}
			rules = appendUnique(rules, sg.Family)
		}
		if c.Onset != nil && p.sigma > 0 && len(p.times) > 0 && !p.times[len(p.times)-1].Before(*c.Onset) {
			for _, r := range c.Rules {
				if r != FamilyLimit {
					rules = appendUnique(rules, r)
				}
			}
		}
		if c.Level >= halfmark.LevelScheduled && c.Component.Kind != halfmark.ComponentJaw &&
			c.Component.Kind != halfmark.ComponentPenumbra && c.Component.Kind != halfmark.ComponentLightField {
			rules = appendUnique(rules, FamilyLimit) // the bank mean or the leaf residual is beyond its limit
		}
		if len(rules) == 0 {
			continue
		}
		c.Evidence = append(c.Evidence, halfmark.Evidence{SeriesID: p.in.ID, Beam: p.in.BeamLabel, Geometry: p.in.Geometry,
			Method: p.in.Method, Edge: p.in.Edge, Quantity: p.in.Quantity, Rules: rules, Level: p.res.Evaluation.Level,
			DeviationMM: p.res.Evaluation.DeviationMM})
	}
	c.Message = message(c, ps)
}

func machineName(c *ComponentResult, ps []*prepared) string {
	for _, p := range ps {
		if p.in.MachineID == c.MachineID && p.in.MachineName != "" {
			return p.in.MachineName
		}
	}
	return fmt.Sprintf("machine %d", c.MachineID)
}

// message says which machine, which component, how far and how soon, in
// a physicist's words.
func message(c *ComponentResult, ps []*prepared) string {
	var b strings.Builder
	name := map[halfmark.ComponentKind]string{
		halfmark.ComponentJaw: "jaw " + c.Component.Name, halfmark.ComponentMLCBank: "MLC " + c.Component.Name,
		halfmark.ComponentMLCLeaf: "MLC leaf " + c.Component.Name, halfmark.ComponentPenumbra: "penumbra of " + c.Component.Name,
		halfmark.ComponentLightField: "light field of jaw " + c.Component.Name,
	}[c.Component.Kind]
	what := map[halfmark.ComponentKind]string{
		halfmark.ComponentJaw: "edge position", halfmark.ComponentMLCBank: "mean leaf-end position",
		halfmark.ComponentMLCLeaf: "leaf end after the bank mean", halfmark.ComponentPenumbra: "80–20 penumbra",
		halfmark.ComponentLightField: "light-field edge against the radiation edge",
	}[c.Component.Kind]
	dir := "outward"
	if c.Component.Kind == halfmark.ComponentPenumbra {
		dir = "wider"
	}
	if c.MagnitudeMM < 0 {
		dir = "inward"
		if c.Component.Kind == halfmark.ComponentPenumbra {
			dir = "narrower"
		}
	}
	fmt.Fprintf(&b, "%s, %s: %s %.2f mm %s of its baseline (95%% CI %+.2f to %+.2f mm)", machineName(c, ps), name, what,
		math.Abs(c.MagnitudeMM), dir, c.MagnitudeCIMM[0], c.MagnitudeCIMM[1])
	if c.Onset != nil {
		fmt.Fprintf(&b, " since about %s", c.Onset.Format("2006-01-02"))
	}
	if l := c.Limits; l != nil {
		fmt.Fprintf(&b, "; tolerance %.2f mm, action limit %.2f mm", l.ToleranceMM, l.ActionMM)
	}
	switch c.Crossing.Status {
	case halfmark.CrossingAlreadyBeyond:
		if c.Level >= halfmark.LevelImmediate {
			b.WriteString(" — beyond the action limit: act now")
		} else {
			b.WriteString(" — beyond tolerance: schedule an adjustment")
		}
	case halfmark.CrossingProjected:
		fmt.Fprintf(&b, "; at %+.3f mm/day it reaches the tolerance about %s", c.Trend.SlopePer30d/30, c.Crossing.ToleranceDate.Format("2006-01-02"))
		if iv := c.Crossing.ToleranceInterval; iv[0] != nil && iv[1] != nil {
			fmt.Fprintf(&b, " (95%% interval %s to %s)", iv[0].Format("2006-01-02"), iv[1].Format("2006-01-02"))
		}
	case halfmark.CrossingBeyondHorizon:
		fmt.Fprintf(&b, "; drifting %+.3f mm/day, not reaching the tolerance within the horizon", c.Trend.SlopePer30d/30)
	default:
		if c.Level == halfmark.LevelInspect {
			b.WriteString("; a statistical signal without a significant trend: inspect")
		}
	}
	if c.Pair != nil {
		b.WriteString(". Pair check: " + c.Pair.Summary)
	}
	if len(c.Sessions) > 0 {
		fmt.Fprintf(&b, " (%d views in the newest session)", c.Sessions[len(c.Sessions)-1].Views)
	}
	return b.String()
}
