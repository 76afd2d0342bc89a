package spc

import (
	"bufio"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"
)

// readSubgroups reads testdata with one subgroup per line ('#' comments).
func readSubgroups(t *testing.T, path string) [][]float64 {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var groups [][]float64
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line, _, _ := strings.Cut(sc.Text(), "#")
		fields := strings.Fields(line)
		if len(fields) == 0 {
			continue
		}
		g := make([]float64, len(fields))
		for i, s := range fields {
			if g[i], err = strconv.ParseFloat(s, 64); err != nil {
				t.Fatal(err)
			}
		}
		groups = append(groups, g)
	}
	return groups
}

// Piston rings, samples 1-25 of n = 5 (Montgomery; data from the qcc R
// package, see testdata/pistonrings_trial.txt). Results seen in the qcc
// vignette (spc.md): centre 74.00118, σ = 0.009785039 (R̄/2.326),
// LCL 73.98805, UCL 74.0143, R centre 0.02276, R UCL 0.04812533.
// Convention: σ̂ = R̄/d2 with the table d2 = 2.326; x̄ limits x̿ ± 3σ̂/√5.
// Tolerances are half a unit of the last printed digit, except R UCL: qcc
// multiplies by an unrounded D4 (0.04812533/0.02276 = 2.11447) where the
// table prints D4 = 2.114, so the two may differ by up to R̄·0.0005.
func TestXbarRPistonRings(t *testing.T) {
	groups := readSubgroups(t, "testdata/pistonrings_trial.txt")
	if len(groups) != 25 {
		t.Fatalf("read %d subgroups, want 25", len(groups))
	}
	r, err := XbarR(groups)
	if err != nil {
		t.Fatal(err)
	}
	check := func(r XbarRLimits, src string) {
		near(t, src+" centre", r.Centre, 74.00118, 0.000005)
		near(t, src+" sigma", r.Sigma, 0.009785039, 0.0000000005)
		near(t, src+" LCL", r.LCL, 73.98805, 0.000005)
		near(t, src+" UCL", r.UCL, 74.0143, 0.00005)
		near(t, src+" R centre", r.RCentre, 0.02276, 0.000005)
		near(t, src+" R UCL", r.RUCL, 0.04812533, 0.02276*0.0005)
		if r.RLCL != 0 {
			t.Errorf("%s R LCL %v, want 0 (D3 = 0 for n = 5)", src, r.RLCL)
		}
	}
	check(r.XbarRLimits, "data")
	if r.N != 5 || len(r.Means) != 25 || len(r.RSignal) != 25 {
		t.Errorf("n %d, %d means, %d R flags", r.N, len(r.Means), len(r.RSignal))
	}
	// The same limits from the published summary statistics alone.
	lim, err := XbarRFromStatistics(74.00118, 0.02276, 5)
	if err != nil {
		t.Fatal(err)
	}
	check(lim, "statistics")
	// A2 form of the x̄ limits (Montgomery §6.2): x̿ ± A2·R̄ with A2 = 0.577
	// agrees to A2's rounding (0.0005·R̄).
	near(t, "UCL via A2", lim.UCL, 74.00118+0.577*0.02276, 0.0005*0.02276)
}

func TestXbarRErrors(t *testing.T) {
	cases := map[string][][]float64{
		"none":        nil,
		"size 1":      {{1}, {2}},
		"size 11":     {make([]float64, 11)},
		"unequal":     {{1, 2}, {1, 2, 3}},
		"NaN":         {{1, 2}, {math.NaN(), 3}},
		"zero ranges": {{1, 1}, {2, 2}},
	}
	for name, g := range cases {
		if _, err := XbarR(g); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}
