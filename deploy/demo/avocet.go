package demo

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"time"

	"halfmark"
	"halfmark/analysis/epid/synth"
	"halfmark/analysis/penumbra"
)

// Avocet's story: a service replaces the target and re-tunes the beam
// steering 120 days before the end; the focal spot comes back larger
// (σ_s 0.45 → 0.60 mm), so the penumbra of the upper (X) jaws, nearest the
// source, widens most — by about half a millimetre, inside the 1 mm
// penumbra tolerance. Its monthly tank session scans every beam at three
// setups, which lets the penumbra model separate the source from the
// radiological part.

const avocet = "Avocet"

// avocetService is the day of Avocet's target service.
func (g *Generator) avocetService() time.Time { return g.End.AddDate(0, 0, -120).Add(13 * time.Hour) }

// avocetSigmaMM is Avocet's true source σ_s (mm) at t.
func (g *Generator) avocetSigmaMM(t time.Time) float64 {
	if t.After(g.avocetService()) {
		return 0.60
	}
	return 0.45
}

// avocetSetups are the tank setups of Avocet's sessions: field side (cm),
// SSD (cm) and depth (cm).
var avocetSetups = []struct{ field, ssd, depth float64 }{{20, 90, 10}, {10, 100, 1.5}, {10, 80, 20}}

// avocetTank returns one tank session of one beam: an X and a Y profile at
// each setup, with edges whose 80–20 widths follow the penumbra model
// √((1.6832·σ_s·M)² + R(d)²) for Avocet's collimators (invented:
// R(d) = 1.9 + 0.04·E + 0.08·d mm).
func (g *Generator) avocetTank(m Machine, machineID, beamID int64, b Beam, at time.Time, kind halfmark.CheckKind, keep bool, setupSD float64) []Item {
	geo := penumbra.GeometryOf(*m.Machine.Collimators)
	var out []Item
	for si, s := range avocetSetups {
		for ai, axis := range []string{"X", "Y"} {
			coll, _ := geo.CollimatorOf(axis + "1")
			mag := penumbra.Magnification(s.ssd, s.depth, geo.SCD(coll))
			r := 1.9 + 0.04*b.EnergyMV + 0.08*s.depth
			sigma := math.Hypot(g.avocetSigmaMM(at)*mag, r/penumbra.K8020) // the edge's Gaussian σ, mm
			half := s.field / 2 * 10 * (s.ssd + s.depth) / m.Machine.SADcm
			t := at.Add(time.Duration(si*20+ai*8) * time.Minute)
			c := halfmark.Check{MachineID: machineID, BeamID: beamID, Kind: kind, MeasuredAt: t,
				Device: "water tank, 0.04 cm³ chamber", Operator: physicists[g.rng.IntN(len(physicists))],
				Setup: halfmark.Setup{SSDcm: f(s.ssd), DepthCm: f(s.depth), FieldXcm: f(s.field), FieldYcm: f(s.field)}}
			out = append(out, Item{Check: c, Raw: g.edgeProfile(b, axis, s.ssd, s.depth, s.field, half+g.noise(setupSD), half+g.noise(setupSD), sigma, t, keep)})
		}
	}
	return out
}

// edgeProfile renders a flat-topped scan with error-function edges of
// Gaussian σ sigmaMM at −lo and +hi mm, sampled every 0.5 mm with 0.2%
// noise.
func (g *Generator) edgeProfile(b Beam, axis string, ssd, depth, field, lo, hi, sigmaMM float64, at time.Time, keep bool) *Raw {
	var sb strings.Builder
	fmt.Fprintf(&sb, "# %s, %s, %s profile, %gx%g cm, SSD %g cm, depth %g cm (invented demo data)\nposition_mm,signal\n",
		avocet, halfmark.BeamLabel(b.EnergyMV, b.FFF), axis, field, field, ssd, depth)
	for x := -150.0; x <= 150.0001; x += 0.5 {
		v := 100*(synth.Phi((x+lo)/sigmaMM)-synth.Phi((x-hi)/sigmaMM)) + 0.6
		v *= 1 + g.noise(0.002)
		fmt.Fprintf(&sb, "%.1f,%.3f\n", x, v)
	}
	opts, _ := json.Marshal(map[string]any{"axis": axis})
	return &Raw{Kind: halfmark.RawProfile, Filename: fmt.Sprintf("avocet-%s-%s-ssd%g-d%g-%s.csv",
		strings.ReplaceAll(strings.ToLower(halfmark.BeamLabel(b.EnergyMV, b.FFF)), " ", ""), strings.ToLower(axis), ssd, depth, at.Format("20060102-1504")),
		Data: []byte(sb.String()), Options: opts, Keep: keep}
}
