package profile

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

const (
	// MaxCSVRows is the most data rows ParseCSV reads; a beam profile has a
	// few thousand at most, so more means the wrong file.
	MaxCSVRows = 2_000_000
	// maxLineBytes bounds one input line.
	maxLineBytes = 1 << 20
)

// ParseCSV reads a two-column profile: position_mm and signal, one sample a
// line. Columns are separated by a comma, tab, semicolon or spaces (decided
// per line: semicolon, else comma, else tab, else whitespace). With semicolons
// a decimal comma is accepted ("1,5;87,2"). Blank lines and text after '#'
// are ignored, and so are trailing empty columns; the first non-blank line
// may be a header (its first column is not a number). A UTF-8 byte-order mark
// and CRLF line ends are accepted. Errors are *ParseError values giving the
// line number and reason; more than MaxCSVRows data rows is ErrTooManyRows.
// Values are not checked against each other — Analyze does that.
func ParseCSV(r io.Reader) ([]Sample, error) {
	return parseCSV(r, MaxCSVRows)
}

func parseCSV(r io.Reader, maxRows int) ([]Sample, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64*1024), maxLineBytes)
	var out []Sample
	line, content := 0, 0 // line number; non-blank lines seen
	for sc.Scan() {
		line++
		text := sc.Bytes()
		if line == 1 {
			text = bytes.TrimPrefix(text, []byte("\xef\xbb\xbf"))
		}
		if k := bytes.IndexByte(text, '#'); k >= 0 {
			text = text[:k]
		}
		s := strings.TrimSpace(string(text))
		if s == "" {
			continue
		}
		content++
		fields := splitFields(s)
		if content == 1 && !isNumber(fields[0]) {
			continue // header
		}
		if len(fields) != 2 {
			return nil, &ParseError{Line: line, Reason: fmt.Sprintf("found %d columns, expected 2 (position_mm, signal)", len(fields))}
		}
		if len(out) == maxRows {
			return nil, &ParseError{Line: line, Reason: fmt.Sprintf("more than %d data rows; this is not a single beam profile — split or down-sample the file", maxRows), Err: ErrTooManyRows}
		}
		var smp Sample
		var err error
		if smp.PositionMM, err = parseValue(fields[0], "position_mm"); err != nil {
			return nil, &ParseError{Line: line, Reason: err.Error()}
		}
		if smp.Signal, err = parseValue(fields[1], "signal"); err != nil {
			return nil, &ParseError{Line: line, Reason: err.Error()}
		}
		out = append(out, smp)
	}
	if err := sc.Err(); err != nil {
		if errors.Is(err, bufio.ErrTooLong) {
			return nil, &ParseError{Line: line + 1, Reason: fmt.Sprintf("line longer than %d bytes; is this a profile file?", maxLineBytes)}
		}
		return nil, fmt.Errorf("profile: reading line %d: %w", line+1, err)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: %d lines read, none with a position and a signal", ErrNoData, line)
	}
	return out, nil
}

// splitFields splits a non-empty trimmed line into trimmed columns, dropping
// trailing empty ones. With semicolons, a lone decimal comma in a column
// becomes a point.
func splitFields(s string) []string {
	var sep string
	switch {
	case strings.Contains(s, ";"):
		sep = ";"
	case strings.Contains(s, ","):
		sep = ","
	case strings.Contains(s, "\t"):
		sep = "\t"
	default:
		return strings.Fields(s)
	}
	fields := strings.Split(s, sep)
	for len(fields) > 1 && strings.TrimSpace(fields[len(fields)-1]) == "" {
		fields = fields[:len(fields)-1]
	}
	for i, f := range fields {
		f = strings.TrimSpace(f)
		if sep == ";" && strings.Count(f, ",") == 1 && !strings.Contains(f, ".") {
			f = strings.Replace(f, ",", ".", 1)
		}
		fields[i] = f
	}
	return fields
}

func isNumber(s string) bool {
	_, err := strconv.ParseFloat(s, 64)
	return err == nil || errors.Is(err, strconv.ErrRange)
}

func parseValue(s, column string) (float64, error) {
	if s == "" {
		return 0, fmt.Errorf("%s column is empty", column)
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil && !errors.Is(err, strconv.ErrRange) {
		return 0, fmt.Errorf("%s %q is not a number", column, s)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%s %q is not a finite number", column, s)
	}
	return v, nil
}
