package epid

import (
	"encoding/json"
	"errors"
	"math"
	"slices"
	"strings"
	"testing"
)

// basePicket: Layout60 (40 central 5 mm pairs span ±100 mm, the imager sees
// ±100.3 mm in y), five 3 mm strips 30 mm apart, Y jaws at ±90 mm.
func basePicket() picketSpec {
	return picketSpec{Layout: Layout60, Pickets: []float64{-60, -30, 0, 30, 60}, Width: 3, Sigma: 1.0, YJaw: 90,
		Bg: 500, Amp: 20000, Err1: map[[2]int]float64{}, Err2: map[[2]int]float64{}}
}

var basePicketOpts = PicketOptions{NominalMM: []float64{-60, -30, 0, 30, 60}, Layout: Layout60, ToleranceMM: 0.5}

type leafKey struct {
	bank, pair int
	picket     float64
}

func exceedKeys(r PicketResult) []leafKey {
	var k []leafKey
	for _, l := range r.Exceeding {
		k = append(k, leafKey{l.Bank, l.Pair, l.PicketMM})
	}
	return k
}

func findLeaf(r PicketResult, bank, pair int, picket float64) (LeafResult, bool) {
	for _, l := range r.Leaves {
		if l.Bank == bank && l.Pair == pair && l.PicketMM == picket {
			return l, true
		}
	}
	return LeafResult{}, false
}

func TestPicketCleanFence(t *testing.T) {
	p := basePicket()
	r, err := AnalyzePicketFence(p.image(), basePicketOpts)
	if err != nil {
		t.Fatal(err)
	}
	// Pairs 11..50 are imaged (centres within ±100 mm); 11 and 12 (centres
	// 97.5 and 92.5 mm) and 49, 50 sit behind the ±90 mm Y jaws.
	if r.PairsMeasured != 36 {
		t.Errorf("pairs_measured %d, want 36 (13..48)", r.PairsMeasured)
	}
	if !slices.Equal(r.PairsNotExposed, []int{11, 12, 49, 50}) {
		t.Errorf("pairs_not_exposed %v, want [11 12 49 50]", r.PairsNotExposed)
	}
	if len(r.PairsNotImaged) != 20 {
		t.Errorf("pairs_not_imaged %v, want 20 pairs", r.PairsNotImaged)
	}
	if len(r.Leaves) != 36*5*2 {
		t.Errorf("%d leaf results, want 360", len(r.Leaves))
	}
	// Strips are symmetric, so centres are exact whatever the level
	// (testutil_test.go). Edges are cut at half the picket's median height;
	// pairs 13 and 48 lie 2.5 mm inside the Y jaws, their strips ~6% lower, so
	// their edges sit a few hundredths of a mm inward.
	if r.MaxAbsErrorMM > 0.05 || len(r.Exceeding) != 0 {
		t.Errorf("clean fence: max_abs_error_mm %.4f, exceeding %v", r.MaxAbsErrorMM, exceedKeys(r))
	}
	for _, l := range r.Leaves {
		if l.Pair > 13 && l.Pair < 48 && math.Abs(l.ErrorMM) > 0.005 {
			t.Errorf("leaf %+v: error beyond 0.005 mm away from the jaws", l)
		}
	}
	for _, p := range r.Pairs {
		if math.Abs(p.ErrorMM) > 0.005 {
			t.Errorf("pair %d centre error %.4f mm", p.Pair, p.ErrorMM)
		}
	}
	for _, pk := range r.Pickets {
		near(t, "picket offset", pk.OffsetMM, 0, 0.01)
		near(t, "picket rotation", pk.RotationDeg, 0, 0.01)
	}
}

func TestPicketInjectedErrors(t *testing.T) {
	// Pair 30 shifted +0.8 mm at the 30 mm picket (both banks), and bank 2 of
	// pair 45 opened by +0.8 mm at the −30 mm picket. Tolerance 0.5 mm;
	// 1% noise per pixel; several seeds: exactly these leaf ends exceed.
	want := []leafKey{{1, 30, 30}, {2, 30, 30}, {2, 45, -30}}
	for seed := uint64(1); seed <= 5; seed++ {
		p := basePicket()
		p.Noise, p.Seed = 200, seed
		p.Err1[[2]int{30, 3}], p.Err2[[2]int{30, 3}] = 0.8, 0.8
		p.Err2[[2]int{45, 1}] = 0.8
		r, err := AnalyzePicketFence(p.image(), basePicketOpts)
		if err != nil {
			t.Fatal(err)
		}
		got := exceedKeys(r)
		if !slices.Equal(got, want) {
			t.Errorf("seed %d: exceeding %v, want %v", seed, got, want)
		}
		// The injected errors are recovered (error = measured − nominal).
		for _, w := range want {
			l, _ := findLeaf(r, w.bank, w.pair, w.picket)
			near(t, "injected error_mm", l.ErrorMM, 0.8, 0.1)
			near(t, "injected residual_mm", l.ResidualMM, 0.8, 0.15)
		}
		// The untouched bank 1 of pair 45 stays put.
		l, _ := findLeaf(r, 1, 45, -30)
		near(t, "bank 1 of pair 45", l.ErrorMM, 0, 0.1)
		near(t, "max_abs_error_mm", r.MaxAbsErrorMM, 0.8, 0.1)
	}
}

func TestPicketGlobalShiftAndRotation(t *testing.T) {
	// The whole fence shifted 0.7 mm and turned 0.3°: every error shows it,
	// the straight-line residuals remove it.
	p := basePicket()
	p.Shift, p.RotDeg = 0.7, 0.3
	img := p.image()
	r, err := AnalyzePicketFence(img, basePicketOpts)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Exceeding) != 0 || r.MaxAbsResidualMM > 0.05 {
		t.Errorf("residual criterion: exceeding %d, max residual %.3f", len(r.Exceeding), r.MaxAbsResidualMM)
	}
	for _, pk := range r.Pickets {
		near(t, "picket offset_mm", pk.OffsetMM, 0.7, 0.02)
		near(t, "picket rotation_deg", pk.RotationDeg, 0.3, 0.01)
	}
	// At y = ±87.5 mm the 0.3° turn adds ∓0.46 mm to the 0.7 mm shift.
	near(t, "max_abs_error_mm", r.MaxAbsErrorMM, 0.7+87.5*math.Tan(0.3*math.Pi/180), 0.03)
	o := basePicketOpts
	o.UseError = true
	r, err = AnalyzePicketFence(img, o)
	if err != nil {
		t.Fatal(err)
	}
	if r.Criterion != "error_mm" || len(r.Exceeding) == 0 {
		t.Errorf("error criterion: %s, %d exceeding; want leaves beyond 0.5 mm", r.Criterion, len(r.Exceeding))
	}
}

// halfHeightOutside is how far outside a leaf tip the half-height point of an
// erf strip of width w and blur σ lies: the δ solving
// Φ(−δ/σ) − Φ(−(δ+w)/σ) = (2Φ(w/2σ) − 1)/2, by bisection (derived from the
// strip model in testutil_test.go).
func halfHeightOutside(w, sigma float64) float64 {
	half := (2*phi(w/(2*sigma)) - 1) / 2
	f := func(d float64) float64 { return phi(-d/sigma) - phi(-(d+w)/sigma) - half }
	lo, hi := -w/2, 5*sigma // f(lo) > 0 > f(hi)
	for range 100 {
		m := (lo + hi) / 2
		if f(m) > 0 {
			lo = m
		} else {
			hi = m
		}
	}
	return (lo + hi) / 2
}

func TestPicketBanks(t *testing.T) {
	// Every bank 1 leaf end moved 0.3 mm toward X2 (strips 0.3 mm narrower),
	// the nominal 50% strip width taken from the unchanged fence.
	run := func(width float64) PicketResult {
		ref := basePicket()
		ref.Width = width
		r0, err := AnalyzePicketFence(ref.image(), basePicketOpts)
		if err != nil {
			t.Fatal(err)
		}
		p := basePicket()
		p.Width = width
		for pair := 1; pair <= 60; pair++ {
			for j := range p.Pickets {
				p.Err1[[2]int{pair, j}] = 0.3
			}
		}
		o := basePicketOpts
		o.StripWidthMM = r0.Pickets[2].WidthMM
		r, err := AnalyzePicketFence(p.image(), o)
		if err != nil {
			t.Fatal(err)
		}
		if r.Banks[0].Bank != 1 || r.Banks[1].Bank != 2 || r.Banks[0].N != 180 {
			t.Errorf("banks %+v", r.Banks)
		}
		return r
	}
	t.Run("wide strips", func(t *testing.T) {
		// 6 mm strips, σ = 1 mm: the half-height point sits on the tip
		// (δ < 0.01 mm), so bank 1 takes the whole 0.3 mm.
		r := run(6)
		near(t, "bank 1 mean_error_mm", r.Banks[0].MeanErrorMM, 0.3, 0.01)
		near(t, "bank 2 mean_error_mm", r.Banks[1].MeanErrorMM, 0, 0.01)
	})
	t.Run("narrow strips", func(t *testing.T) {
		// 3 mm strips: the half-height point lies δ(w) outside each tip and δ
		// grows as the strip narrows, so part of bank 1's error shows on
		// bank 2: err1 = 0.3 + δ(3) − δ(2.7), err2 = δ(2.7) − δ(3).
		r := run(3)
		d3, d27 := halfHeightOutside(3, 1), halfHeightOutside(2.7, 1)
		near(t, "bank 1 mean_error_mm", r.Banks[0].MeanErrorMM, 0.3+d3-d27, 0.01)
		near(t, "bank 2 mean_error_mm", r.Banks[1].MeanErrorMM, d27-d3, 0.01)
		if d27-d3 < 0.03 {
			t.Fatalf("δ(2.7) − δ(3) = %.3f: too small to test the crosstalk", d27-d3)
		}
	})
}

func TestPicketAutoNominal(t *testing.T) {
	p := basePicket()
	p.Shift = 0.4
	r, err := AnalyzePicketFence(p.image(), PicketOptions{Layout: Layout60})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Pickets) != 5 {
		t.Fatalf("%d pickets found, want 5", len(r.Pickets))
	}
	for i, pk := range r.Pickets {
		near(t, "found picket", pk.NominalMM, p.Pickets[i]+0.4, 0.02)
	}
	if !strings.Contains(strings.Join(r.Warnings, ";"), "5 pickets found") {
		t.Errorf("warnings %q", r.Warnings)
	}
}

func TestPicketInverted(t *testing.T) {
	p := basePicket()
	p.Err1[[2]int{30, 3}], p.Err2[[2]int{30, 3}] = 0.8, 0.8
	img := p.image()
	for i, v := range img.Pix {
		img.Pix[i] = 30000 - v
	}
	r, err := AnalyzePicketFence(img, basePicketOpts)
	if err != nil {
		t.Fatal(err)
	}
	if !r.Inverted || !slices.Equal(exceedKeys(r), []leafKey{{1, 30, 30}, {2, 30, 30}}) {
		t.Errorf("inverted=%v exceeding %v", r.Inverted, exceedKeys(r))
	}
}

func TestPicketErrors(t *testing.T) {
	img := basePicket().image()
	cases := map[string]PicketOptions{
		"no layout":        {NominalMM: []float64{0}},
		"outside image":    {NominalMM: []float64{0, 200}, Layout: Layout60},
		"not increasing":   {NominalMM: []float64{30, 0}, Layout: Layout60},
		"negative tol":     {NominalMM: []float64{0}, Layout: Layout60, ToleranceMM: -1},
		"window too large": {NominalMM: []float64{0, 30}, Layout: Layout60, SearchMM: 20},
	}
	for name, o := range cases {
		if _, err := AnalyzePicketFence(img, o); !errors.Is(err, ErrInvalidOption) {
			t.Errorf("%s: %v, want ErrInvalidOption", name, err)
		}
	}
	blank := fieldSpec{X1: -200, X2: -190, Y1: 10, Y2: 10, Sigma: 1, Bg: 1000, Amp: 0, Noise: 10, Seed: 3}.image()
	if _, err := AnalyzePicketFence(blank, PicketOptions{Layout: Layout60}); !errors.Is(err, ErrNoField) {
		t.Errorf("blank image: %v, want ErrNoField", err)
	}
}

func TestPicketJSON(t *testing.T) {
	r, err := AnalyzePicketFence(basePicket().image(), basePicketOpts)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(r)
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"leaves", "max_abs_error_mm", "banks", "exceeding"} {
		if _, ok := m[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	leaf := m["leaves"].([]any)[0].(map[string]any)
	for _, k := range []string{"bank", "pair", "picket_mm", "error_mm", "residual_mm"} {
		if _, ok := leaf[k]; !ok {
			t.Errorf("leaf JSON lacks %q: %v", k, leaf)
		}
	}
	if ex, ok := m["exceeding"].([]any); !ok || len(ex) != 0 {
		t.Errorf("exceeding should be an empty array, got %v", m["exceeding"])
	}
}

func TestPicketFlatImageRefused(t *testing.T) {
	// Strips one count high on a flat 1000 (0.1% of the signal range): no
	// picket fence, with or without nominal positions.
	p := basePicket()
	p.Bg, p.Amp = 1000, 1
	im := p.image()
	for i, v := range im.Pix {
		im.Pix[i] = math.Round(v)
	}
	if _, err := AnalyzePicketFence(im, basePicketOpts); !errors.Is(err, ErrNoField) {
		t.Errorf("one-count strips with nominal positions: %v, want ErrNoField", err)
	}
	if _, err := AnalyzePicketFence(im, PicketOptions{Layout: Layout60}); !errors.Is(err, ErrNoField) {
		t.Errorf("one-count strips found automatically: %v, want ErrNoField", err)
	}
}
