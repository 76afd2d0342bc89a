package spc

import (
	"slices"
	"strings"
	"testing"
	"time"
)

func TestParseSeriesValues(t *testing.T) {
	in := "# penumbra X1, mm\n\n 4.12\n4.15  # repeat after service\n4.2e0\n-0.5\n"
	v, times, err := ParseSeries(strings.NewReader(in))
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(v, []float64{4.12, 4.15, 4.2, -0.5}) || times != nil {
		t.Errorf("values %v times %v", v, times)
	}
	v, _, err = ParseSeries(strings.NewReader("value\n1\n2\n"))
	if err != nil || !slices.Equal(v, []float64{1, 2}) {
		t.Errorf("with header: %v %v", v, err)
	}
}

func TestParseSeriesTimes(t *testing.T) {
	// Comma, comma and blank, tab, and blank separators; a header line.
	in := "time,value\n2025-03-03,100.1\n2025-03-04T08:30:00Z, 100.3\n" +
		"2025-03-04T10:30:00+02:00\t100.2\n2025-03-05 99.9\n"
	v, times, err := ParseSeries(strings.NewReader(in))
	if err != nil {
		t.Fatal(err)
	}
	want := []time.Time{
		time.Date(2025, 3, 3, 0, 0, 0, 0, time.UTC),
		time.Date(2025, 3, 4, 8, 30, 0, 0, time.UTC),
		time.Date(2025, 3, 4, 8, 30, 0, 0, time.UTC),
		time.Date(2025, 3, 5, 0, 0, 0, 0, time.UTC),
	}
	if !slices.Equal(v, []float64{100.1, 100.3, 100.2, 99.9}) || len(times) != len(want) {
		t.Fatalf("values %v times %v", v, times)
	}
	for i := range want {
		if !times[i].Equal(want[i]) {
			t.Errorf("time %d = %v, want %v", i, times[i], want[i])
		}
	}
}

// Errors name the line (1-based, counting comments and blanks) and the text.
func TestParseSeriesErrors(t *testing.T) {
	cases := []struct{ in, want string }{
		{"1\n2\nabc\n", "line 3"},
		{"# c\n1\n\n2025-01-01,2\n", "line 4"},
		{"2025-01-01,1\n3\n", "line 2"},
		{"2025-01-02,1\n2025-01-01,2\n", "line 2: time 2025-01-01 is earlier"},
		{"2025-13-01,1\n", "line 1: time \"2025-13-01\""},
		{"1,2,3\n", "line 1"},
		{"1\nNaN\n", "line 2: value \"NaN\""},
		{"1\n+Inf\n", "line 2"},
		{"# only comments\n\n", "no values"},
		{"", "no values"},
	}
	for _, c := range cases {
		_, _, err := ParseSeries(strings.NewReader(c.in))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%q: error %v, want it to mention %q", c.in, err, c.want)
		}
	}
}

func FuzzParseSeries(f *testing.F) {
	for _, s := range []string{"1\n2\n", "time,value\n2025-01-01,1\n", "# x\n2025-01-01T00:00:00Z 3\n", "a,b,c"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, in string) {
		v, times, err := ParseSeries(strings.NewReader(in))
		if err != nil {
			return
		}
		if len(v) == 0 || (times != nil && len(times) != len(v)) {
			t.Fatalf("%d values, %d times without error", len(v), len(times))
		}
		if checkFinite("value", v) != nil {
			t.Fatalf("non-finite value accepted: %v", v)
		}
		for i := 1; i < len(times); i++ {
			if times[i].Before(times[i-1]) {
				t.Fatalf("times out of order accepted")
			}
		}
	})
}
