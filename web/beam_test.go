package web_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"halfmark"
	"halfmark/analysis/penumbra"
)

// The beam page shows the fitted model, its residuals by collimator and
// setup, a prediction at another setup and the cause of the change since
// a service. The data are generated from the stated model with known
// values (an analytic check): σ_s 0.5 mm growing to 0.7 mm at the service,
// R(d) = 2.0 + 0.07·d mm, noise 0.08 mm.
func TestBeamPage(t *testing.T) {
	h := newHarness(t, harnessOpts{engine: true})
	a := halfmark.CLIActor("test")
	m := halfmark.Machine{Name: "Linac Godwit", MLCLeafPairs: 60,
		Collimators: &halfmark.Collimators{UpperJaws: "Y", UpperSCDcm: 28, LowerSCDcm: 37, MLCSCDcm: 50}}
	if err := h.db.CreateMachine(h.ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := h.db.CreateBeam(h.ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	g := penumbra.GeometryOf(*m.Collimators)
	rng := rand.New(rand.NewPCG(9, 9))
	t0 := time.Now().UTC().AddDate(0, 0, -60).Truncate(time.Hour)
	service := t0.AddDate(0, 0, 40).Add(30 * time.Minute)
	var cs []halfmark.Check
	for k := 0; k < 50; k++ {
		sigma := 0.5
		at := t0.AddDate(0, 0, k)
		if at.After(service) {
			sigma = 0.7
		}
		for si, s := range [][2]float64{{100, 1.5}, {90, 10}, {80, 20}} {
			ssd, d := s[0], s[1]
			c := halfmark.Check{MachineID: m.ID, BeamID: b.ID, Kind: halfmark.KindMonthly, MeasuredAt: at.Add(time.Duration(si) * time.Minute),
				Setup: halfmark.Setup{SSDcm: &ssd, DepthCm: &d, FieldXcm: &[]float64{20}[0], FieldYcm: &[]float64{20}[0]}}
			for _, e := range []string{"X1", "X2", "Y1", "Y2", "B1P30", "B2P30"} {
				coll, _ := g.CollimatorOf(e)
				gw := penumbra.SourceWidth8020(sigma, penumbra.Magnification(ssd, d, g.SCD(coll)))
				v := math.Sqrt(gw*gw+math.Pow(2+0.07*d, 2)) + 0.08*rng.NormFloat64()
				c.Edges = append(c.Edges, halfmark.EdgeResult{Edge: e, PositionMM: 100, PenumbraMM: &v})
			}
			cs = append(cs, c)
		}
	}
	if _, err := h.db.RecordBatch(h.ctx, a, cs); err != nil {
		t.Fatal(err)
	}
	ev := halfmark.ServiceEvent{MachineID: m.ID, At: service, Note: "target replaced"}
	if err := h.db.CreateServiceEvent(h.ctx, a, &ev); err != nil {
		t.Fatal(err)
	}
	c := h.signIn("therapist@example.org")
	page := fmt.Sprintf("/machines/%d/beams/%d", m.ID, b.ID)
	code, body, _ := c.get(page + "?ssd_cm=120&depth_cm=5&collimator=mlc")
	must(t, code == 200, "beam page: %d %s", code, body)
	for _, want := range []string{"Source σ", "Residuals by collimator and setup", "10×10 cm, SSD 80 d 20", "upper jaws Y at 28 cm",
		"Penumbra since the service of", "target replaced", "consistent with a larger source"} {
		if !strings.Contains(body, want) && !strings.Contains(body, strings.ReplaceAll(want, "10×10", "20×20")) {
			t.Errorf("the page lacks %q", want)
		}
	}
	if !strings.Contains(body, "<strong>source</strong>") {
		t.Errorf("the cause is not source: %s", regexp.MustCompile(`(?s)<p id="cause">.*?</p>`).FindString(body))
	}
	// The prediction at SSD 120 d 5 for the MLC, against the generating
	// model over the whole period (σ_s between 0.5 and 0.7 mm).
	pm := regexp.MustCompile(`Modelled 80–20 penumbra: <strong>([0-9.]+) mm</strong>`).FindStringSubmatch(body)
	must(t, pm != nil, "no prediction on the page")
	got, _ := strconv.ParseFloat(pm[1], 64)
	lo := math.Hypot(penumbra.SourceWidth8020(0.5, penumbra.Magnification(120, 5, 50)), 2.35)
	hi := math.Hypot(penumbra.SourceWidth8020(0.7, penumbra.Magnification(120, 5, 50)), 2.35)
	if got < lo-0.05 || got > hi+0.05 {
		t.Errorf("predicted %.2f mm, want between %.2f and %.2f", got, lo, hi)
	}
	code, body, _ = c.get(page + "?ssd_cm=abc&depth_cm=5&collimator=upper")
	must(t, code == 200 && strings.Contains(body, "SSD must be a number"), "bad SSD: %d", code)
	code, body, _ = c.get(page + "?ssd_cm=120&depth_cm=5&collimator=side")
	must(t, code == 200 && strings.Contains(body, "collimator must be upper, lower or mlc"), "bad collimator: %d", code)
	code, _, _ = c.get(fmt.Sprintf("/machines/%d/beams/999999", m.ID))
	must(t, code == 404, "unknown beam: %d", code)

	// A machine without collimator geometry: the page says what to record.
	mid, bids := h.machine("Linac Dunlin", 6)
	code, body, _ = c.get(fmt.Sprintf("/machines/%d/beams/%d", mid, bids[0]))
	must(t, code == 200 && strings.Contains(body, "no penumbra measured"), "no data: %d %s", code, body)
	code, _, _ = h.client().get(page)
	must(t, code == 303 || code == 302, "signed out: %d", code)
}
