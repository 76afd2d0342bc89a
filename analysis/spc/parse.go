package spc

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
	"unicode"
)

// ParseSeries reads a QA series, one measurement per line, in either form:
//
//	1.23                      a value (mm, %) per line
//	2025-03-04,1.23           a time and a value (RFC 3339 or YYYY-MM-DD, UTC)
//
// Fields may be separated by a comma or by blanks. Everything after '#' is a
// comment; blank lines are skipped; the first line may be a header
// ("time,value"). All lines must have the same form and times must not go
// backwards. times is nil for the one-column form. Errors give the line
// number and the offending text.
func ParseSeries(r io.Reader) (values []float64, times []time.Time, err error) {
	sc := bufio.NewScanner(r)
	lineNo, form := 0, 0 // form: number of fields of the first data line
	for sc.Scan() {
		lineNo++
		line, _, _ := strings.Cut(sc.Text(), "#")
		line = strings.TrimSpace(line)
		if line == "" {
			continue
		}
		var fields []string
		if strings.Contains(line, ",") {
			fields = strings.Split(line, ",")
			for i := range fields {
				fields[i] = strings.TrimSpace(fields[i])
			}
		} else {
			fields = strings.Fields(line)
		}
		if len(fields) != 1 && len(fields) != 2 {
			return nil, nil, fmt.Errorf("spc: line %d: %q has %d fields; write a value, or a time and a value, per line", lineNo, line, len(fields))
		}
		first := form == 0
		if first {
			form = len(fields)
			if isHeader(fields) {
				continue
			}
		} else if len(fields) != form {
			if form == 1 {
				return nil, nil, fmt.Errorf("spc: line %d: %q has a time but earlier lines have only values; use one form throughout", lineNo, line)
			}
			return nil, nil, fmt.Errorf("spc: line %d: %q lacks a time but earlier lines have one; use one form throughout", lineNo, line)
		}
		vs := fields[len(fields)-1]
		v, perr := strconv.ParseFloat(vs, 64)
		if perr != nil || !isFinite(v) {
			return nil, nil, fmt.Errorf("spc: line %d: value %q is not a finite number", lineNo, vs)
		}
		if form == 2 {
			t, terr := parseTime(fields[0])
			if terr != nil {
				return nil, nil, fmt.Errorf("spc: line %d: time %q is neither RFC 3339 (2025-03-04T08:30:00Z) nor a date (2025-03-04)", lineNo, fields[0])
			}
			if n := len(times); n > 0 && t.Before(times[n-1]) {
				return nil, nil, fmt.Errorf("spc: line %d: time %s is earlier than the previous line's %s; sort the file by time", lineNo, fields[0], times[n-1].Format(time.RFC3339))
			}
			times = append(times, t)
		}
		values = append(values, v)
	}
	if err := sc.Err(); err != nil {
		return nil, nil, fmt.Errorf("spc: reading line %d: %w", lineNo+1, err)
	}
	if len(values) == 0 {
		return nil, nil, errors.New("spc: no values found; write one value per line, or a time and a value")
	}
	return values, times, nil
}

func parseTime(s string) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return t, nil
	}
	return time.Parse(time.DateOnly, s)
}

// isHeader reports whether the first line's fields are column names: the
// value field starts with a letter and is not a number (NaN and Inf parse as
// numbers, so they are rejected later as values instead), and a time field
// is not a time.
func isHeader(fields []string) bool {
	if len(fields) == 2 {
		if _, err := parseTime(fields[0]); err == nil {
			return false
		}
	}
	vs := fields[len(fields)-1]
	if _, err := strconv.ParseFloat(vs, 64); err == nil || vs == "" {
		return false
	}
	return unicode.IsLetter([]rune(vs)[0])
}
