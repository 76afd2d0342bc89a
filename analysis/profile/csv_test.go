package profile

import (
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"
	"testing"
)

func TestParseCSVFormats(t *testing.T) {
	want := []Sample{{-1.5, 10}, {0, 20.25}, {1.5, 30}}
	inputs := map[string]string{
		"comma, header, comments, blank": "# scan 1\nposition_mm,signal\n\n-1.5,10\n0, 20.25 # centre\n1.5,30\n",
		"CRLF and BOM":                   "\xef\xbb\xbfposition_mm,signal\r\n-1.5,10\r\n0,20.25\r\n1.5,30\r\n",
		"tab":                            "pos\tsig\n-1.5\t10\n0\t20.25\n1.5\t30",
		"semicolon, decimal comma":       "position_mm;signal\n-1,5;10\n0;20,25\n1,5;30\n",
		"semicolon, decimal point":       "-1.5;10\n0;20.25\n1.5;30\n",
		"whitespace":                     "  -1.5    10\n0 20.25\n\t1.5  30  \n",
		"trailing separator":             "-1.5,10,\n0,20.25,\n1.5,30,\n",
		"exponents":                      "-1.5e0,1e1\n0,2.025E1\n+1.5,30\n",
	}
	for name, in := range inputs {
		got, err := ParseCSV(strings.NewReader(in))
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		if !slices.Equal(got, want) {
			t.Errorf("%s: got %v, want %v", name, got, want)
		}
	}
}

func TestParseCSVErrors(t *testing.T) {
	cases := []struct {
		name, in string
		line     int
		reason   string
	}{
		{"bad signal", "x,y\n1,2\n2,abc\n", 3, `signal "abc" is not a number`},
		{"bad position after header", "x,y\n1,2\nfoo,3\n", 3, `position_mm "foo" is not a number`},
		{"three columns", "1,2\n2,3,4\n", 2, "found 3 columns"},
		{"one column", "1,2\n\n7\n", 3, "found 1 columns"},
		{"empty position", "1,2\n,3\n", 2, "position_mm column is empty"},
		{"NaN", "1,2\n2,NaN\n", 2, "not a finite number"},
		{"Inf", "1,2\n-inf,3\n", 2, "not a finite number"},
		{"overflow", "1,2\n2,1e999\n", 2, "not a finite number"},
	}
	for _, c := range cases {
		_, err := ParseCSV(strings.NewReader(c.in))
		var pe *ParseError
		if !errors.As(err, &pe) || pe.Line != c.line || !strings.Contains(pe.Reason, c.reason) {
			t.Errorf("%s: got %v, want line %d: %s", c.name, err, c.line, c.reason)
		}
		if err != nil && !strings.Contains(err.Error(), fmt.Sprintf("line %d:", c.line)) {
			t.Errorf("%s: message %q lacks the line number", c.name, err)
		}
	}
	for _, in := range []string{"", "# only a comment\n\n", "position_mm,signal\n"} {
		if _, err := ParseCSV(strings.NewReader(in)); !errors.Is(err, ErrNoData) {
			t.Errorf("%q: got %v, want ErrNoData", in, err)
		}
	}
	long := "1," + strings.Repeat("9", maxLineBytes+10) + "\n"
	var pe *ParseError
	if _, err := ParseCSV(strings.NewReader("0,1\n" + long)); !errors.As(err, &pe) || pe.Line != 2 {
		t.Errorf("long line: got %v, want a ParseError on line 2", err)
	}
}

func TestParseCSVRowCap(t *testing.T) {
	in := "h,s\n1,1\n2,2\n3,3\n4,4\n"
	if _, err := parseCSV(strings.NewReader(in), 4); err != nil {
		t.Fatalf("4 rows with cap 4: %v", err)
	}
	_, err := parseCSV(strings.NewReader(in+"5,5\n"), 4)
	var pe *ParseError
	if !errors.Is(err, ErrTooManyRows) || !errors.As(err, &pe) || pe.Line != 6 {
		t.Fatalf("5 rows with cap 4: got %v, want ErrTooManyRows at line 6", err)
	}
	if testing.Short() {
		t.Skip("the full-size cap reads 2,000,001 rows")
	}
	_, err = ParseCSV(&rowReader{rows: MaxCSVRows + 1})
	if !errors.Is(err, ErrTooManyRows) || !strings.Contains(err.Error(), "more than 2000000") {
		t.Fatalf("MaxCSVRows+1 rows: got %v", err)
	}
}

// rowReader streams rows lines of "0,1\n" without holding them.
type rowReader struct{ rows, done int }

func (r *rowReader) Read(p []byte) (int, error) {
	n := 0
	for r.done < r.rows && len(p)-n >= 4 {
		n += copy(p[n:], "0,1\n")
		r.done++
	}
	if n == 0 {
		return 0, io.EOF
	}
	return n, nil
}

// TestParseCSVThenAnalyze: a profile written as text and read back gives the
// analytic edges (derived: 50 % at the geometric edge, 80–20 = 1.6832·σ).
func TestParseCSVThenAnalyze(t *testing.T) {
	f := erfField{-50, 50, 2, 2}
	var b strings.Builder
	b.WriteString("position_mm;signal\n")
	for _, x := range grid(-90, 90, 0.5) {
		fmt.Fprintf(&b, "%s;%s\n", strings.Replace(fmt.Sprint(x), ".", ",", 1), strings.Replace(fmt.Sprintf("%.6f", 1000*f.at(x)), ".", ",", 1))
	}
	s, err := ParseCSV(strings.NewReader(b.String()))
	if err != nil {
		t.Fatal(err)
	}
	r, err := Analyze(s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	checkErf(t, f, r, 0.05)
}
