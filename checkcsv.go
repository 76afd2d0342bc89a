package halfmark

import (
	"crypto/sha1"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
)

// The check-import CSV layout: one row per edge result, a header row naming
// the columns (any order, case-insensitive). Required: machine, beam, kind,
// measured_at, edge, position_mm. Optional: penumbra_mm, light_position_mm,
// ssd_cm, depth_cm, field_x_cm, field_y_cm, collimator_deg, gantry_deg,
// device, operator, note. Rows that share machine, beam, kind, measured_at,
// setup, device and operator form one check. Lines starting with # are
// comments.
var (
	CSVRequired = []string{"machine", "beam", "kind", "measured_at", "edge", "position_mm"}
	CSVOptional = []string{"penumbra_mm", "light_position_mm", "ssd_cm", "depth_cm", "field_x_cm", "field_y_cm",
		"collimator_deg", "gantry_deg", "device", "operator", "note"}
)

// CSVRow is one valid row: its line, the machine and beam as named in the
// file, and a one-edge check (machine and beam ids not yet resolved).
type CSVRow struct {
	Line    int
	Machine string
	Beam    string
	Check   Check
}

// ReadChecksCSV parses and validates every row. It returns the good rows and
// one FieldError (with Line) per bad row; err is set only when the file as a
// whole cannot be read (no header, missing columns, not CSV).
func ReadChecksCSV(r io.Reader, now time.Time) (rows []CSVRow, bad []FieldError, err error) {
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = true
	header, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, nil, fmt.Errorf("the file is empty; it needs a header row: %s", strings.Join(CSVRequired, ","))
		}
		return nil, nil, fmt.Errorf("the header row cannot be read as CSV: %v", err)
	}
	col := map[string]int{}
	for i, h := range header {
		h = strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		if _, dup := col[h]; dup {
			return nil, nil, fmt.Errorf("the header names column %q twice", h)
		}
		col[h] = i
	}
	var missing []string
	for _, c := range CSVRequired {
		if _, ok := col[c]; !ok {
			missing = append(missing, c)
		}
	}
	if len(missing) > 0 {
		return nil, nil, fmt.Errorf("the header lacks the required column(s) %s; required: %s; optional: %s",
			strings.Join(missing, ", "), strings.Join(CSVRequired, ","), strings.Join(CSVOptional, ","))
	}
	known := map[string]bool{}
	for _, c := range append(append([]string{}, CSVRequired...), CSVOptional...) {
		known[c] = true
	}
	for h := range col {
		if !known[h] {
			return nil, nil, fmt.Errorf("the header names an unknown column %q; known columns: %s,%s",
				h, strings.Join(CSVRequired, ","), strings.Join(CSVOptional, ","))
		}
	}
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			if errors.As(err, &pe) {
				bad = append(bad, FieldError{Line: pe.Line, Message: "not valid CSV: " + pe.Err.Error()})
				if errors.Is(pe.Err, csv.ErrQuote) || errors.Is(pe.Err, csv.ErrBareQuote) {
					// A broken quote swallows the rest of the file: stop here.
					return rows, bad, nil
				}
				continue
			}
			return rows, bad, err
		}
		line, _ := cr.FieldPos(0)
		row, fe := parseCSVRow(rec, col, now)
		row.Line = line
		if len(fe) > 0 {
			msgs := make([]string, len(fe))
			for i, f := range fe {
				msgs[i] = f.String()
			}
			bad = append(bad, FieldError{Line: line, Message: strings.Join(msgs, "; ")})
			continue
		}
		rows = append(rows, row)
	}
	return rows, bad, nil
}

func parseCSVRow(rec []string, col map[string]int, now time.Time) (CSVRow, Fields) {
	var f Fields
	get := func(name string) string {
		i, ok := col[name]
		if !ok || i >= len(rec) {
			return ""
		}
		return strings.TrimSpace(rec[i])
	}
	num := func(name string, required bool) *float64 {
		s := get(name)
		if s == "" {
			if required {
				f.Add(name, "is empty; a number is required")
			}
			return nil
		}
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || !finite(v) {
			f.Add(name, "%q is not a finite number", s)
			return nil
		}
		return &v
	}
	row := CSVRow{Machine: get("machine"), Beam: get("beam")}
	if row.Machine == "" {
		f.Add("machine", "is empty; give the machine's name")
	}
	if _, _, err := ParseBeamLabel(row.Beam); err != nil {
		f.Add("beam", "%s", err.Error())
	}
	c := &row.Check
	c.Kind = CheckKind(strings.ToLower(get("kind")))
	if s := get("measured_at"); s != "" {
		t, err := parseCSVTime(s)
		if err != nil {
			f.Add("measured_at", "%q is not a time like 2024-03-02T07:45:00Z or 2024-03-02 07:45", s)
		}
		c.MeasuredAt = t
	}
	c.Device, c.Operator, c.Note = get("device"), get("operator"), get("note")
	c.Setup = Setup{SSDcm: num("ssd_cm", false), DepthCm: num("depth_cm", false), FieldXcm: num("field_x_cm", false),
		FieldYcm: num("field_y_cm", false), CollimatorDeg: num("collimator_deg", false), GantryDeg: num("gantry_deg", false)}
	e := EdgeResult{Edge: get("edge"), PenumbraMM: num("penumbra_mm", false), LightPositionMM: num("light_position_mm", false)}
	if p := num("position_mm", true); p != nil {
		e.PositionMM = *p
	}
	c.Edges = []EdgeResult{e}
	// Machine and beam ids are resolved later; stand-ins keep Validate quiet about them.
	c.MachineID, c.BeamID = 1, 1
	if len(f) == 0 {
		for _, fe := range c.Validate("", now) {
			fe.Field = strings.TrimPrefix(strings.TrimPrefix(fe.Field, "setup."), "edges[0].")
			f = append(f, fe)
		}
	}
	c.MachineID, c.BeamID = 0, 0
	return row, f
}

// parseCSVTime accepts RFC 3339 and "YYYY-MM-DD HH:MM[:SS]" (taken as UTC).
func parseCSVTime(s string) (time.Time, error) {
	for _, layout := range []string{time.RFC3339Nano, "2006-01-02 15:04:05", "2006-01-02 15:04", "2006-01-02T15:04:05", "2006-01-02T15:04"} {
		if t, err := time.Parse(layout, s); err == nil {
			return t, nil
		}
	}
	return time.Time{}, fmt.Errorf("bad time %q", s)
}

// GroupCSVRows joins rows into checks. resolve maps a machine name and beam
// label to ids. Each check gets a UUID derived from its grouping key, so
// importing the same file twice stores nothing new. lines[i] lists the
// source lines of checks[i].
func GroupCSVRows(rows []CSVRow, resolve func(machine, beam string) (machineID, beamID int64, err error)) (checks []Check, lines [][]int, bad []FieldError) {
	index := map[string]int{}
	for _, r := range rows {
		mID, bID, err := resolve(r.Machine, r.Beam)
		if err != nil {
			bad = append(bad, FieldError{Line: r.Line, Message: err.Error()})
			continue
		}
		c := r.Check
		key := strings.Join([]string{r.Machine, strconv.FormatInt(bID, 10), string(c.Kind),
			c.MeasuredAt.UTC().Format(time.RFC3339Nano), c.Setup.Geometry(), num(c.Setup.SSDcm, ""), num(c.Setup.DepthCm, ""),
			c.Device, c.Operator}, "\x1f")
		i, ok := index[key]
		if !ok {
			c.ID = uuidV5(csvNamespace, key)
			c.MachineID, c.BeamID = mID, bID
			c.Edges = nil
			index[key] = len(checks)
			i = len(checks)
			checks = append(checks, c)
			lines = append(lines, nil)
		}
		dup := false
		for _, e := range checks[i].Edges {
			if e.Edge == r.Check.Edges[0].Edge {
				dup = true
			}
		}
		if dup {
			bad = append(bad, FieldError{Line: r.Line, Field: "edge", Message: fmt.Sprintf(
				"%s is given twice for the same check (%s, %s, %s, %s); the first is on line %d",
				r.Check.Edges[0].Edge, r.Machine, r.Beam, c.Kind, c.MeasuredAt.Format(time.RFC3339), lines[i][0])})
			continue
		}
		if r.Check.Note != "" && checks[i].Note == "" {
			checks[i].Note = r.Check.Note
		}
		checks[i].Edges = append(checks[i].Edges, r.Check.Edges[0])
		lines[i] = append(lines[i], r.Line)
	}
	return checks, lines, bad
}

// csvNamespace is the UUID namespace of imported checks (a random constant).
var csvNamespace = [16]byte{0x6a, 0x1f, 0x3c, 0x52, 0x9e, 0x07, 0x4b, 0x8d, 0xa1, 0x44, 0x2e, 0x90, 0x5b, 0x7c, 0xd3, 0x18}

// uuidV5 is a name-based UUID (RFC 9562 §5.5: SHA-1 of namespace + name).
func uuidV5(ns [16]byte, name string) string {
	h := sha1.New()
	h.Write(ns[:])
	h.Write([]byte(name))
	var u [16]byte
	copy(u[:], h.Sum(nil))
	u[6] = u[6]&0x0f | 0x50
	u[8] = u[8]&0x3f | 0x80
	return fmt.Sprintf("%x-%x-%x-%x-%x", u[0:4], u[4:6], u[6:8], u[8:10], u[10:16])
}
