package drift

import (
	"math"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"halfmark"
)

// The pooled chart's CUSUM reproduces Montgomery, Introduction to
// Statistical Quality Control, Example 9.1 (μ0 = 10, σ = 1, k = 0.5, h = 5;
// spc.md, C+ secondary): C+ at samples 1–29, first signal at sample 29,
// N+ = 7 so the shift began after sample 22 — the onset is sample 23.
func TestPooledCUSUMMontgomery91Onset(t *testing.T) {
	wantCPlus := []float64{0, 0, 0, 1.16, 2.82, 2.50, 0.04, 1.00, 0, 0, 0, 0.97, 0.98, 0, 0, 0, 0.12, 0, 0, 0.34, 0.74, 0, 1.79, 2.79,
		2.89, 3.47, 3.35, 4.47, 5.28}
	x := &component{comp: halfmark.Component{Kind: halfmark.ComponentJaw, Name: "Y2"}}
	for i, v := range montgomery91[:29] {
		x.views = append(x.views, view{at: t0.AddDate(0, 0, i), devMM: v - 10, sigma: 1})
	}
	x.sess = sessionsOf(x.views)
	x.levels = make([]halfmark.Level, len(x.sess))
	d := DefaultDetection()
	ps := chartSessions(x, chartDesign{K: 0.5, H: 5, L: 3, EWMAL: 2.814}, d)
	for i, w := range wantCPlus {
		near(t, "C+ at sample "+itoa(i+1), ps[i].CPlus, w, 0.006)
		if got := ps[i].Flags&FlagCUSUM != 0; got != (i == 28) {
			t.Errorf("sample %d: CUSUM flag %v, want %v", i+1, got, i == 28)
		}
	}
	idx, dir := onset(ps, 28, 28)
	if idx != 22 || dir != 1 {
		t.Errorf("onset at sample %d, direction %d; want sample 23 (the shift began after sample 22), +1", idx+1, dir)
	}
}

// Pooling follows the inverse-variance weighted mean and its variance
// (textbook result): the mean equals gonum's weighted stat.Mean with
// w = 1/σ², the independent-view variance is 1/Σ(1/σ²), and with an equal
// correlation ρ the variance equals wᵀΣw/(Σw)² computed with gonum/mat.
func TestPoolWeightedAgainstGonum(t *testing.T) {
	vs := []view{{devMM: 0.12, sigma: 0.1}, {devMM: -0.05, sigma: 0.15}, {devMM: 0.30, sigma: 0.2}, {devMM: 0.02, sigma: 0.1}}
	x, w := make([]float64, len(vs)), make([]float64, len(vs))
	for i, v := range vs {
		x[i], w[i] = v.devMM, 1/(v.sigma*v.sigma)
	}
	m, se, n, ok := poolWeighted(vs, 0)
	if !ok || n != 4 {
		t.Fatalf("pooled %d views, ok %v", n, ok)
	}
	near(t, "weighted mean", m, stat.Mean(x, w), 1e-12)
	near(t, "SE (independent)", se, 1/math.Sqrt(floats(w)), 1e-12)
	for _, rho := range []float64{0.2, 0.5} {
		cov := mat.NewSymDense(len(vs), nil)
		for i := range vs {
			for j := range vs {
				c := vs[i].sigma * vs[j].sigma
				if i != j {
					c *= rho
				}
				cov.SetSym(i, j, c)
			}
		}
		wv := mat.NewVecDense(len(w), w)
		want := math.Sqrt(mat.Inner(wv, cov, wv)) / floats(w)
		_, se, _, _ := poolWeighted(vs, rho)
		near(t, "SE (ρ = "+ftoa(rho)+")", se, want, 1e-12)
	}
	// A bank mean: plain mean, Var = Σσ²/n².
	m, se, _, _ = poolEqual(vs, 0)
	near(t, "bank mean", m, stat.Mean(x, nil), 1e-12)
	near(t, "bank mean SE", se, math.Sqrt(0.01+0.0225+0.04+0.01)/4, 1e-12)
}

func floats(w []float64) float64 {
	var s float64
	for _, v := range w {
		s += v
	}
	return s
}

func ftoa(v float64) string { return itoa(int(v*10)) + "/10" }

// Siegmund's approximation gives Montgomery's Table 9.3 design values
// (from memory, in spc.md): k = 0.5, h = 5: two-sided ARL₀ ≈ 465 (Siegmund:
// 938.6/2 = 469) and ARL at a 1σ shift ≈ 10.4; h = 4: ARL₀ ≈ 168 and 8.38.
// siegmundH inverts it.
func TestSiegmundDesigns(t *testing.T) {
	near(t, "two-sided ARL0 (0.5, 5)", siegmundARL(0.5, 5)/2, 465, 8)
	near(t, "ARL1 at 1σ (0.5, 5)", SiegmundARL1(0.5, 5, 1), 10.4, 0.15)
	near(t, "two-sided ARL0 (0.5, 4)", siegmundARL(0.5, 4)/2, 168, 4)
	near(t, "ARL1 at 1σ (0.5, 4)", SiegmundARL1(0.5, 4, 1), 8.38, 0.15)
	near(t, "h for ARL0⁺ 938.6", siegmundH(0.5, siegmundARL(0.5, 5)), 5, 1e-9)
	// At δ = 0 the ARL1 formula equals ARL0⁺.
	near(t, "ARL1 at δ = 0", SiegmundARL1(0.5, 5, 0), siegmundARL(0.5, 5), 1e-6)
	// The family design: every chart keeps its share of the budget.
	d := DefaultDetection()
	cd := d.familyDesign(CadenceDaily, 4)
	near(t, "daily per-chart ARL target", cd.AC, 2*4*6500, 1e-9)
	near(t, "daily CUSUM ARL0⁺ = 2·A_c", siegmundARL(cd.K, cd.H), 2*cd.AC, 1e-3*cd.AC)
	near(t, "daily Shewhart tail", 2*(1-normalCDF(cd.L)), 1/cd.AC, 1e-9)
}

func normalCDF(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }

// Gauss–Hermite nodes reproduce the normal moments E Z² = 1, E Z⁴ = 3,
// E Z⁶ = 15 (analytic) and E e^Z = e^{1/2}.
func TestHermiteMoments(t *testing.T) {
	for _, rule := range [][]node{gh8, gh16} {
		var s0, s2, s4, s6, se float64
		for _, n := range rule {
			s0 += n.w
			s2 += n.w * n.z * n.z
			s4 += n.w * math.Pow(n.z, 4)
			s6 += n.w * math.Pow(n.z, 6)
			se += n.w * math.Exp(n.z)
		}
		near(t, "Σw", s0, 1, 1e-12)
		near(t, "E Z²", s2, 1, 1e-10)
		near(t, "E Z⁴", s4, 3, 1e-9)
		near(t, "E Z⁶", s6, 15, 1e-8)
		near(t, "E e^Z", se, math.Exp(0.5), 1e-6)
	}
	// No estimation error: the corrected design is the plain one.
	h, L := correctedDesign(1, 52000, estimationError{vb: 1e-12, sdEps: 1e-12})
	near(t, "h without error", h, siegmundH(1, 2*52000), 0.01)
	near(t, "L without error", L, DefaultDetection().familyDesign(CadenceDaily, 4).L, 0.01)
	// With error the charts are wider.
	h2, L2 := correctedDesign(1, 52000, estimationError{vb: 1.0 / 20, sdEps: 0.17})
	if h2 <= h || L2 <= L {
		t.Errorf("estimation error must widen the charts: h %.2f → %.2f, L %.2f → %.2f", h, h2, L, L2)
	}
}

// LevelOf: strict limits (a value on a limit is inside, spc's
// convention), the sign does not matter, zero limits are not set
// (TG-142 levels).
func TestLevelOf(t *testing.T) {
	l := halfmark.Limits{ToleranceMM: 2, ActionMM: 3}
	for _, c := range []struct {
		d    float64
		want halfmark.Level
	}{{0, 0}, {2, 0}, {-2.0001, 2}, {3, 2}, {3.01, 3}, {-4, 3}} {
		if got := LevelOf(c.d, l); got != c.want {
			t.Errorf("LevelOf(%v) = %v, want %v", c.d, got, c.want)
		}
	}
	if LevelOf(10, halfmark.Limits{}) != 0 {
		t.Error("zero limits must not raise a level")
	}
}

func TestDetectionValidate(t *testing.T) {
	if err := DefaultDetection().Validate(); err != nil {
		t.Fatalf("the shipped design must validate: %v", err)
	}
	bad := DefaultDetection()
	bad.Daily.CUSUMK = 0
	bad.NelsonRules = []int{2}
	bad.EWMALambda = 0.3
	err := bad.Validate()
	if err == nil {
		t.Fatal("a bad design validated")
	}
	for _, key := range []string{"daily.cusum_k", "nelson_rules", "ewma_lambda"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("error %q does not name %s", err, key)
		}
	}
	if _, err := EvaluateMachine(nil, testBook{}, bad, t0); err == nil {
		t.Error("EvaluateMachine accepted a bad design")
	}
}

func series(id int64, edge string, q halfmark.Quantity, m halfmark.Method, base, sigma *float64, ts []time.Time, x []float64) SeriesInput {
	kinds := make([]halfmark.CheckKind, len(ts))
	for i := range kinds {
		kinds[i] = halfmark.KindMonthly
	}
	return SeriesInput{ID: id, MachineID: 1, BeamID: 1, MachineName: "Tern", BeamLabel: "6 MV", Geometry: "10×10 cm, iso", Edge: edge,
		Quantity: q, Method: m, BaselineValueMM: base, BaselineSigmaMM: sigma, Times: ts, ValuesMM: x, Kinds: kinds}
}

// The verdict words (halfmark.Verdict*): in_control only where the charts
// ran, within_tolerance where only the limits could be checked,
// baseline_pending, signal, not_evaluated.
func TestSeriesVerdictWords(t *testing.T) {
	ts := days(30)
	flat := make([]float64, 30)
	for i := range flat {
		flat[i] = 50 + 0.05*math.Sin(float64(i))
	}
	d := DefaultDetection()
	now := ts[29]
	cases := []struct {
		name string
		s    SeriesInput
		want string
	}{
		{"stored baseline", series(1, "X1", halfmark.QPosition, halfmark.MethodTyped, ptr(50), ptr(0.1), ts, flat), halfmark.VerdictInControl},
		{"value set, σ pending", series(2, "X1", halfmark.QPosition, halfmark.MethodTyped, ptr(50), nil, ts[:5], flat[:5]), halfmark.VerdictWithinTolerance},
		{"nothing set, few points", series(3, "X1", halfmark.QPosition, halfmark.MethodTyped, nil, nil, ts[:5], flat[:5]), halfmark.VerdictBaselinePending},
		{"beyond tolerance", series(4, "X1", halfmark.QPosition, halfmark.MethodTyped, ptr(47), ptr(0.1), ts, flat), halfmark.VerdictSignal},
		{"NaN value", series(5, "X1", halfmark.QPosition, halfmark.MethodTyped, ptr(50), ptr(0.1), ts[:2], []float64{50, math.NaN()}), halfmark.VerdictNotEvaluated},
		// A light offset is judged against zero without a stored value.
		{"light offset", series(6, "X1", halfmark.QLightOffset, halfmark.MethodTyped, nil, nil, ts[:5], []float64{2.5, 2.4, 2.6, 2.5, 2.5}), halfmark.VerdictSignal},
	}
	for _, c := range cases {
		r, err := EvaluateSeries(c.s, testBook{}, d, now)
		if err != nil {
			t.Fatal(err)
		}
		if r.Evaluation.Verdict != c.want {
			t.Errorf("%s: verdict %q (level %d, rule %q), want %q", c.name, r.Evaluation.Verdict, r.Evaluation.Level, r.Evaluation.Rule, c.want)
		}
	}
}

// A jaw seen by two methods (typed and EPID), each with its own baseline,
// feeds one component: a 0.3 mm outward shift of Y2 in both (σ 0.1 mm:
// 3σ per view) gives one jaw finding pooling both views.
func TestMethodsFeedOneComponent(t *testing.T) {
	n := 80
	ts := days(n)
	typed, epid := make([]float64, n), make([]float64, n)
	for i := range typed {
		noise := 0.1 * math.Sin(float64(i)*1.7)
		typed[i], epid[i] = 50+noise, 49.2-noise
		if i >= 60 {
			typed[i] += 0.3
			epid[i] += 0.3
		}
	}
	ss := []SeriesInput{
		series(1, "Y2", halfmark.QPosition, halfmark.MethodTyped, ptr(50), ptr(0.1), ts, typed),
		series(2, "Y2", halfmark.QPosition, halfmark.MethodEPID, ptr(49.2), ptr(0.1), ts, epid),
	}
	r, err := EvaluateMachine(ss, testBook{}, DefaultDetection(), ts[n-1])
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Components) != 1 {
		t.Fatalf("%d components, want one jaw", len(r.Components))
	}
	c := r.Components[0]
	if !c.Active || c.Level != halfmark.LevelInspect || c.Direction != 1 {
		t.Fatalf("jaw Y2: active %v level %d direction %d; want an active Level-1 outward finding: %s", c.Active, c.Level, c.Direction, c.Message)
	}
	if v := c.Sessions[n-1].Views; v != 2 {
		t.Errorf("newest session pools %d views, want 2", v)
	}
	near(t, "magnitude", c.MagnitudeMM, 0.3, 0.05)
	if c.Onset == nil || c.Onset.Before(ts[55]) || c.Onset.After(ts[62]) {
		t.Errorf("onset %v, want near %s", c.Onset, ts[60].Format("2006-01-02"))
	}
	if len(c.Evidence) != 2 {
		t.Errorf("%d evidence series, want 2", len(c.Evidence))
	}
}

// A leaf is a finding only when its residual after the bank mean is
// beyond the leaf tolerance (1 mm): a whole-bank offset of 0.9 mm is one
// bank finding, a single leaf 1.3 mm out on top of it is also a leaf
// finding.
func TestLeafResidual(t *testing.T) {
	n := 24
	ts := make([]time.Time, n)
	for i := range ts {
		ts[i] = t0.AddDate(0, i, 0)
	}
	var ss []SeriesInput
	for p := 1; p <= 20; p++ {
		for bank := 1; bank <= 2; bank++ {
			x := make([]float64, n)
			for i := range x {
				x[i] = 0.08 * math.Sin(float64(i*p+bank))
				if bank == 2 && i >= 20 {
					x[i] += 0.9
					if p == 7 {
						x[i] += 1.3
					}
				}
			}
			edge := "B" + itoa(bank) + "P" + itoa(p)
			ss = append(ss, series(int64(100*bank+p), edge, halfmark.QPosition, halfmark.MethodEPID, ptr(0), ptr(0.08), ts, x))
		}
	}
	r, err := EvaluateMachine(ss, testBook{}, DefaultDetection(), ts[n-1])
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, c := range activeOf(r) {
		got = append(got, c.Component.String()+" L"+itoa(int(c.Level)))
	}
	// bank 2 mean = 0.9 + 1.3/20 = 0.965 mm: beyond 0.5, inside 1.0 (L2);
	// B2P7 residual ≈ 1.3 − 0.065 = 1.235 mm: beyond 1.0, inside 1.5 (L2).
	want := []string{"mlc_bank bank 2 L2", "mlc_leaf B2P7 L2"}
	if len(got) != len(want) || got[0] != want[0] || got[1] != want[1] {
		t.Errorf("active findings %v, want %v", got, want)
	}
}

// A transient jump opens a finding that resolves itself once the pooled
// chart has been clean for Detection.ResolveSessions sessions (stated
// model: a 0.5 mm jump of one typed view, σ 0.1 mm, on sessions 40–42).
func TestFindingResolves(t *testing.T) {
	n := 100
	ts := days(n)
	x := make([]float64, n)
	for i := range x {
		x[i] = 50 + 0.1*math.Sin(float64(i)*2.3)
		if i >= 40 && i <= 42 {
			x[i] += 0.5
		}
	}
	s := []SeriesInput{series(1, "X1", halfmark.QPosition, halfmark.MethodTyped, ptr(50), ptr(0.1), ts, x)}
	d := DefaultDetection()
	during, err := EvaluateMachine(truncate(s, ts[43]), testBook{}, d, ts[43])
	if err != nil {
		t.Fatal(err)
	}
	if c := during.Components[0]; !c.Active || c.BackInControl || c.Onset == nil || !c.Onset.Equal(ts[40]) {
		t.Errorf("during the jump: active %v, back %v, onset %v; want an active finding from %s", c.Active, c.BackInControl, c.Onset, ts[40].Format("2006-01-02"))
	}
	after, _ := EvaluateMachine(s, testBook{}, d, ts[n-1])
	c := after.Components[0]
	if c.Active || !c.BackInControl || c.Level != 0 {
		t.Errorf("long after the jump: active %v, back %v, level %d; want back in control", c.Active, c.BackInControl, c.Level)
	}
	// The first session from which the newest ResolveSessions are clean.
	clean := 0
	for _, p := range c.Sessions {
		if p.Flags != 0 {
			clean = 0
		} else {
			clean++
		}
	}
	if clean < d.ResolveSessions {
		t.Errorf("only %d clean sessions at the end", clean)
	}
}
