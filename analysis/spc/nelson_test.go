package spc

import (
	"math"
	"slices"
	"testing"
)

// Hand-built sequences for the Nelson rules (Nelson, J. Quality Technology
// 16(4), 1984, "The Shewhart control chart — tests for special causes";
// rules seen in two secondary copies), centre 0 and sigma 1 so values
// are z-scores. Each case gives the indices where the rule must fire; an
// empty list is a near miss that must not fire. The first expected index is
// the point that completes the pattern, so the rule must not fire one point
// earlier.
func TestNelsonRules(t *testing.T) {
	rep := func(v float64, n int) []float64 { return slices.Repeat([]float64{v}, n) }
	alt := func(a, b float64, n int) []float64 {
		s := make([]float64, n)
		for i := range s {
			s[i] = a
			if i%2 == 1 {
				s[i] = b
			}
		}
		return s
	}
	cat := func(parts ...[]float64) []float64 { return slices.Concat(parts...) }
	cases := []struct {
		name string
		rule int
		x    []float64
		want []int
	}{
		{"1 beyond +3", 1, []float64{0, 0.5, 3.01, 0}, []int{2}},
		{"1 beyond -3", 1, []float64{0, -3.5}, []int{1}},
		{"1 on the limits", 1, []float64{3, -3, 2.99}, nil},

		{"2 nine above", 2, cat([]float64{-0.5}, rep(0.5, 9)), []int{9}},
		{"2 nine below, run of ten", 2, rep(-0.1, 10), []int{8, 9}},
		{"2 eight then a point on the centre", 2, cat(rep(0.5, 8), []float64{0}, rep(0.5, 8)), nil},
		{"2 eight then the other side", 2, cat(rep(0.5, 8), []float64{-0.5}), nil},

		{"3 six increasing", 3, []float64{0.5, 0, 0.1, 0.2, 0.3, 0.4, 0.5}, []int{6}},
		{"3 six decreasing", 3, []float64{0.5, 0.4, 0.3, 0.2, 0.1, 0}, []int{5}},
		{"3 a tie breaks the run", 3, []float64{0, 0.1, 0.2, 0.2, 0.3, 0.4, 0.5}, nil},
		{"3 five increasing", 3, []float64{0, 0.1, 0.2, 0.3, 0.4, 0.3}, nil},

		{"4 fourteen alternating", 4, alt(0.1, -0.1, 14), []int{13}},
		// alt(0.1, -0.1, 13) ends with an up step to 0.1 at index 12.
		{"4 thirteen alternating then a repeat", 4, cat(alt(0.1, -0.1, 13), []float64{0.1}), nil},
		{"4 thirteen alternating then up again", 4, cat(alt(0.1, -0.1, 13), []float64{0.2}), nil},

		{"5 two of three above 2", 5, []float64{0, 2.5, 0, 2.5}, []int{3}},
		{"5 two in a row at the start", 5, []float64{-2.5, -2.1}, []int{1}},
		{"5 two of four", 5, []float64{2.5, 0, 0, 2.5}, nil},
		{"5 opposite sides", 5, []float64{2.5, -2.5, 0}, nil},
		{"5 one exactly on 2", 5, []float64{2, 2.5, 0}, nil},

		{"6 four of five above 1", 6, []float64{1.5, 1.5, 0, 1.5, 1.5}, []int{4}},
		{"6 four of five below 1", 6, []float64{-1.5, -1.5, -1.5, -1.5}, []int{3}},
		{"6 one exactly on 1", 6, []float64{1.5, 1.5, 0, 1, 1.5}, nil},
		{"6 three of five", 6, []float64{1.5, 1.5, 0, 1.5, 0, 1.5}, nil},

		{"7 fifteen within 1", 7, cat([]float64{2}, alt(1, -1, 15)), []int{15}},
		{"7 fourteen within then out", 7, cat(alt(0.5, -0.5, 14), []float64{1.01}), nil},

		{"8 eight beyond 1 either side", 8, cat([]float64{0}, alt(1.5, -1.5, 8)), []int{8}},
		{"8 seven beyond then on 1", 8, cat(alt(1.5, -1.5, 7), []float64{1}), nil},
	}
	for _, c := range cases {
		hits, err := Nelson(c.x, 0, 1, c.rule)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		var got []int
		for _, h := range hits {
			if h.Rule != c.rule {
				t.Errorf("%s: rule %d reported when only %d was asked for", c.name, h.Rule, c.rule)
			}
			got = append(got, h.Index)
		}
		if !slices.Equal(got, c.want) {
			t.Errorf("%s: rule %d fired at %v, want %v", c.name, c.rule, got, c.want)
		}
	}
}

// The points of a hit are the pattern: the whole window for run rules, the
// points beyond the zone for rules 5 and 6; scaling by centre and sigma
// gives the same hits as z-scores.
func TestNelsonPointsAndScaling(t *testing.T) {
	z := []float64{0, 2.5, 0, 2.5, 1.5, 1.5}
	x := make([]float64, len(z))
	for i, v := range z {
		x[i] = 10 + 0.2*v // centre 10 mm, sigma 0.2 mm
	}
	hits, err := Nelson(x, 10, 0.2, 5, 6)
	if err != nil {
		t.Fatal(err)
	}
	// Rule 6 does not fire at index 4: only 1, 3, 4 are beyond 1σ.
	want := []RuleHit{
		{Rule: 5, Index: 3, Points: []int{1, 3}},
		{Rule: 6, Index: 5, Points: []int{1, 3, 4, 5}},
	}
	if len(hits) != len(want) {
		t.Fatalf("hits %+v, want %+v", hits, want)
	}
	for i := range want {
		if hits[i].Rule != want[i].Rule || hits[i].Index != want[i].Index || !slices.Equal(hits[i].Points, want[i].Points) {
			t.Errorf("hit %d = %+v, want %+v", i, hits[i], want[i])
		}
	}

	run, _ := Nelson(slices.Repeat([]float64{0.5}, 9), 0, 1, 2)
	if len(run) != 1 || !slices.Equal(run[0].Points, []int{0, 1, 2, 3, 4, 5, 6, 7, 8}) {
		t.Errorf("rule 2 points %+v", run)
	}
}

// With no rules given all eight run; hits come ordered by index, then rule.
func TestNelsonAllRulesOrder(t *testing.T) {
	// Index 8 completes nine above (rule 2); 3.5 at index 8 is also rule 1,
	// and with 2.5 at index 7 rule 5; indices 5..8 beyond 1 make rule 6.
	// Rule 3 does not fire: the tie 1.5, 1.5 breaks the increase.
	x := []float64{0.5, 0.5, 0.5, 0.5, 0.5, 1.5, 1.5, 2.5, 3.5}
	hits, err := Nelson(x, 0, 1)
	if err != nil {
		t.Fatal(err)
	}
	var rules []int
	for _, h := range hits {
		if h.Index == 8 {
			rules = append(rules, h.Rule)
		}
	}
	if !slices.Equal(rules, []int{1, 2, 5, 6}) {
		t.Errorf("rules at index 8: %v, want [1 2 5 6]", rules)
	}
	for i := 1; i < len(hits); i++ {
		a, b := hits[i-1], hits[i]
		if a.Index > b.Index || (a.Index == b.Index && a.Rule >= b.Rule) {
			t.Errorf("hits out of order: %+v before %+v", a, b)
		}
	}
}

func TestRuleDescription(t *testing.T) {
	if RuleDescription(4) == "" || RuleDescription(9) != "" {
		t.Error("rule descriptions")
	}
}

func TestNelsonErrors(t *testing.T) {
	if _, err := Nelson([]float64{1}, 0, 0); err == nil {
		t.Error("zero sigma: no error")
	}
	if _, err := Nelson([]float64{1}, 0, 1, 9); err == nil {
		t.Error("rule 9: no error")
	}
	if _, err := Nelson([]float64{math.NaN()}, 0, 1); err == nil {
		t.Error("NaN value: no error")
	}
	if _, err := Nelson([]float64{1}, math.NaN(), 1); err == nil {
		t.Error("NaN centre: no error")
	}
}
