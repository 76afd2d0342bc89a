package sheet

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"halfmark"
)

// Options are the caller's choices; each non-zero one overrides the
// mapping.
type Options struct {
	Decimal    string         // DecimalAuto, DecimalPoint or DecimalComma
	DateFormat string         // DateDMY or DateMDY
	Location   *time.Location // zone of times written without one; nil: the mapping's timezone, else UTC
	Sheets     []string       // XLSX: read only these sheets
	Now        time.Time      // for the "not in the future" rule
}

// Row is one read row: a one-beam check with the edges the row gave (one
// in the long layout, one per filled edge column in the wide layout), its
// machine and beam as written (after the mapping's [beams]), and where it
// came from. Machine and beam ids are left 0 for the caller to resolve.
type Row struct {
	Sheet   string // XLSX sheet name; "" for text files
	Line    int    // 1-based line (text) or row number (XLSX)
	Machine string
	Beam    string
	Check   halfmark.Check
}

// Refused is one row (or sheet) that was not read, and why
// (halfmark.ImportRefused).
type Refused = halfmark.ImportRefused

// Result is what Read found.
type Result struct {
	Rows      []Row
	Refused   []Refused
	Read      int    // data rows read (good and refused, blank rows not counted)
	Format    string // "csv" or "xlsx"
	Separator rune   // text files: the separator used
	Decimal   string // the decimal mark used
	Sheets    []string
}

// Read reads a CSV/TSV file or an XLSX workbook (told apart by its first
// bytes) with mapping m. err is set only when nothing can be read (not
// text, an encoding refused, the header lacks the mapped columns); rows
// that cannot be read are in Result.Refused with their line, column and
// reason.
func Read(data []byte, m *Mapping, opt Options) (*Result, error) {
	if m == nil {
		m = DefaultMapping()
	}
	if opt.Now.IsZero() {
		opt.Now = time.Now()
	}
	if bytes.HasPrefix(data, []byte("PK\x03\x04")) {
		return readXLSX(data, m, opt)
	}
	text, err := DecodeText(data, m.Encoding)
	if err != nil {
		return nil, err
	}
	sep := m.Separator
	if sep == 0 {
		sep = DetectSeparator(text)
	}
	dec := firstNonEmpty(opt.Decimal, m.Decimal, DecimalAuto)
	if dec == DecimalAuto {
		dec = detectDecimal(text, sep)
	}
	res := &Result{Format: "csv", Separator: sep, Decimal: dec}
	cr := csv.NewReader(strings.NewReader(text))
	cr.Comma = sep
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = true
	var rd *tableReader
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			if !errors.As(err, &pe) {
				return nil, err
			}
			if rd == nil {
				return nil, fmt.Errorf("the header row cannot be read as CSV: %v", err)
			}
			res.Read++
			res.Refused = append(res.Refused, Refused{Line: pe.Line, Reason: "not valid CSV: " + pe.Err.Error()})
			if errors.Is(pe.Err, csv.ErrQuote) || errors.Is(pe.Err, csv.ErrBareQuote) {
				break // a broken quote swallows the rest of the file
			}
			continue
		}
		line, _ := cr.FieldPos(0)
		if rd == nil {
			if m.HeaderRow > 0 && line < m.HeaderRow {
				continue
			}
			rd, err = newTableReader(m, opt, "", rec, dec)
			if err != nil {
				return nil, err
			}
			continue
		}
		rd.row(res, rec, line)
	}
	if rd == nil {
		return nil, fmt.Errorf("the file is empty; it needs a header row of column titles")
	}
	return res, nil
}

func firstNonEmpty(s ...string) string {
	for _, v := range s {
		if v != "" {
			return v
		}
	}
	return ""
}

// detectDecimal decides between the decimal point and the decimal comma
// from the cells of the first 2000 lines: the comma when some cells read
// like "50,2" and none like "50.2" (and the separator is not the comma),
// else the point.
func detectDecimal(text string, sep rune) string {
	if sep == ',' {
		return DecimalPoint
	}
	commas, points := 0, 0
	for n := 0; n < 2000 && text != ""; n++ {
		var line string
		line, text, _ = strings.Cut(text, "\n")
		if strings.HasPrefix(line, "#") {
			continue
		}
		for _, cell := range strings.Split(line, string(sep)) {
			switch decimalShape(strings.Trim(cell, "\" ")) {
			case ',':
				commas++
			case '.':
				if !strings.Contains(cell, ":") { // not a time
					points++
				}
			}
		}
	}
	if commas > 0 && points == 0 {
		return DecimalComma
	}
	return DecimalPoint
}

// tableReader turns the records of one table (a text file or one sheet)
// into rows.
type tableReader struct {
	m      *Mapping
	sheet  string
	dec    string
	datefm string
	loc    *time.Location
	now    time.Time
	col    map[string]int    // field → column index
	title  map[string]string // field → column title, for messages
	consts map[string]string
	edges  []wideEdge
}

type wideEdge struct {
	edge             string
	pos, pen, light  int // column index, −1 when not mapped
	posT, penT, litT string
}

func normTitle(s string) string {
	return strings.ToLower(strings.Join(strings.Fields(strings.TrimPrefix(s, "\ufeff")), " "))
}

// newTableReader matches the header against the mapping.
func newTableReader(m *Mapping, opt Options, sheet string, header []string, dec string) (*tableReader, error) {
	t := &tableReader{m: m, sheet: sheet, dec: dec, datefm: firstNonEmpty(opt.DateFormat, m.DateFormat), now: opt.Now,
		col: map[string]int{}, title: map[string]string{}, consts: map[string]string{}}
	t.loc = time.UTC
	switch {
	case opt.Location != nil:
		t.loc = opt.Location
	case m.Timezone != "":
		loc, err := time.LoadLocation(m.Timezone)
		if err != nil {
			return nil, fmt.Errorf("timezone %q: %v", m.Timezone, err)
		}
		t.loc = loc
	}
	idx := map[string]int{}
	titles := make([]string, len(header))
	for i, h := range header {
		titles[i] = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		k := normTitle(h)
		if k == "" {
			continue
		}
		if _, dup := idx[k]; dup {
			if m.strict {
				return nil, fmt.Errorf("the header names column %q twice", k)
			}
			continue // the first of two equal titles is used
		}
		idx[k] = i
	}
	if m.strict {
		if err := strictHeader(idx); err != nil {
			return nil, err
		}
	}
	var missing []string
	find := func(label, title string) int {
		i, ok := idx[normTitle(title)]
		if !ok {
			missing = append(missing, fmt.Sprintf("%q (%s)", title, label))
			return -1
		}
		return i
	}
	for f, title := range m.Columns {
		if m.strict {
			if i, ok := idx[f]; ok {
				t.col[f], t.title[f] = i, f
			}
			continue
		}
		if i := find(f, title); i >= 0 {
			t.col[f], t.title[f] = i, titles[i]
		}
	}
	for _, e := range m.edgesSorted() {
		w := wideEdge{edge: e, pos: find(e, m.Position[e]), pen: -1, light: -1}
		if w.pos >= 0 {
			w.posT = titles[w.pos]
		}
		if s := m.Penumbra[e]; s != "" {
			if w.pen = find("penumbra."+e, s); w.pen >= 0 {
				w.penT = titles[w.pen]
			}
		}
		if s := m.Light[e]; s != "" {
			if w.light = find("light."+e, s); w.light >= 0 {
				w.litT = titles[w.light]
			}
		}
		t.edges = append(t.edges, w)
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("the header has no column %s named in the mapping; its columns are: %s",
			strings.Join(missing, ", "), quoteAll(titles))
	}
	for k, v := range m.Constants {
		t.consts[k] = v
	}
	for k, v := range m.PerSheet[sheet] {
		t.consts[k] = v
	}
	for _, f := range []string{"machine", "beam", "kind"} {
		if _, ok := t.col[f]; !ok && t.consts[f] == "" {
			return nil, fmt.Errorf("the mapping gives neither a column nor a constant for %s; add [columns] %s = \"its column title\" or [constants] %s = \"…\"", f, f, f)
		}
	}
	_, hasAt := t.col["measured_at"]
	_, hasDate := t.col["date"]
	if !hasAt && !hasDate && t.consts["measured_at"] == "" && t.consts["date"] == "" {
		return nil, fmt.Errorf("the mapping gives no column for the date; add [columns] measured_at = \"its column title\" (or date and time)")
	}
	return t, nil
}

func strictHeader(idx map[string]int) error {
	var missing []string
	for _, c := range LongRequired {
		if _, ok := idx[c]; !ok {
			missing = append(missing, c)
		}
	}
	optional := []string{}
	for _, f := range append(append([]string{}, checkFields...), longFields...) {
		if !contains(LongRequired, f) && f != "date" && f != "time" {
			optional = append(optional, f)
		}
	}
	if len(missing) > 0 {
		return fmt.Errorf("the header lacks the required column(s) %s; required: %s; optional: %s (for other column titles or a wide layout, give a mapping: --map FILE.toml, and halfmark import suggest FILE writes one)",
			strings.Join(missing, ", "), strings.Join(LongRequired, ","), strings.Join(optional, ","))
	}
	for h := range idx {
		if !contains(LongRequired, h) && !contains(optional, h) && !contains(exportOnly, h) {
			return fmt.Errorf("the header names an unknown column %q; known columns: %s,%s (for other titles give a mapping: --map FILE.toml)",
				h, strings.Join(LongRequired, ","), strings.Join(optional, ","))
		}
	}
	return nil
}

func contains(list []string, s string) bool {
	for _, v := range list {
		if v == s {
			return true
		}
	}
	return false
}

func quoteAll(ss []string) string {
	q := make([]string, 0, len(ss))
	for _, s := range ss {
		if s != "" {
			q = append(q, strconv.Quote(s))
		}
	}
	return strings.Join(q, ", ")
}

// cell is one value with where it came from.
type cell struct {
	v      string
	column string // title, or "constant FIELD"
}

func (t *tableReader) get(rec []string, f string) cell {
	if i, ok := t.col[f]; ok && i < len(rec) {
		if v := strings.TrimSpace(rec[i]); v != "" {
			return cell{v, t.title[f]}
		}
	}
	if v, ok := t.consts[f]; ok {
		return cell{v, "constant " + f}
	}
	if _, ok := t.col[f]; ok {
		return cell{"", t.title[f]}
	}
	return cell{"", f}
}

func blank(rec []string) bool {
	for _, s := range rec {
		if strings.TrimSpace(s) != "" {
			return false
		}
	}
	return true
}

// row reads one record into res.
func (t *tableReader) row(res *Result, rec []string, line int) {
	if blank(rec) {
		return
	}
	res.Read++
	r, fe := t.parse(rec)
	r.Sheet, r.Line = t.sheet, line
	if len(fe) > 0 {
		res.Refused = append(res.Refused, refusal(t.sheet, line, fe))
		return
	}
	res.Rows = append(res.Rows, r)
}

func refusal(sheet string, line int, fe halfmark.Fields) Refused {
	if len(fe) == 1 {
		return Refused{Sheet: sheet, Line: line, Column: fe[0].Field, Reason: fe[0].Message}
	}
	msgs := make([]string, len(fe))
	for i, f := range fe {
		msgs[i] = f.String()
	}
	return Refused{Sheet: sheet, Line: line, Reason: strings.Join(msgs, "; ")}
}

// parse reads one non-blank record. Field errors name column titles.
func (t *tableReader) parse(rec []string) (Row, halfmark.Fields) {
	var f halfmark.Fields
	num := func(field string, conv func(v float64, unit string) (float64, error)) *float64 {
		c := t.get(rec, field)
		if c.v == "" {
			return nil
		}
		v, unit, err := parseNumber(c.v, t.dec)
		if err == nil {
			v, err = conv(v, unit)
		}
		if err != nil {
			f.Add(c.column, "%v", err)
			return nil
		}
		return &v
	}
	cm := func(v float64, unit string) (float64, error) { return lengthCm(v, unit) }
	deg := func(v float64, unit string) (float64, error) { return v, angleDeg(unit) }

	var row Row
	mc := t.get(rec, "machine")
	row.Machine = mc.v
	if row.Machine == "" {
		f.Add(mc.column, "is empty; give the machine's name")
	}
	bc := t.get(rec, "beam")
	row.Beam = bc.v
	if l, ok := t.m.Beams[normBeam(bc.v)]; ok {
		row.Beam = l
	}
	if _, _, err := halfmark.ParseBeamLabel(row.Beam); err != nil {
		f.Add(bc.column, "%s; map it to a beam label in [beams] of the mapping", err.Error())
	}
	c := &row.Check
	kc := t.get(rec, "kind")
	c.Kind = halfmark.CheckKind(strings.ToLower(kc.v))
	c.MeasuredAt = t.when(rec, &f)
	c.Device, c.Operator, c.Note = t.get(rec, "device").v, t.get(rec, "operator").v, t.get(rec, "note").v
	c.Method = halfmark.Method(strings.ToLower(strings.TrimSpace(t.get(rec, "method").v))) // empty: inferred when stored
	c.ID, c.Supersedes = strings.ToLower(t.get(rec, "id").v), strings.ToLower(t.get(rec, "supersedes").v)
	c.Setup = halfmark.Setup{SSDcm: num("ssd_cm", cm), DepthCm: num("depth_cm", cm), FieldXcm: num("field_x_cm", cm),
		FieldYcm: num("field_y_cm", cm), CollimatorDeg: num("collimator_deg", deg), GantryDeg: num("gantry_deg", deg)}

	// titles[i] are the column titles of edge i: edge, position, penumbra, light.
	var titles [][4]string
	if t.m.Layout == LayoutWide {
		for _, w := range t.edges {
			pos := cellAt(rec, w.pos)
			pen, lit := cellAt(rec, w.pen), cellAt(rec, w.light)
			if pos == "" {
				if pen != "" || lit != "" {
					f.Add(w.posT, "is empty but the row gives %s's penumbra or light-field edge; give the position too", w.edge)
				}
				continue
			}
			e := halfmark.EdgeResult{Edge: w.edge}
			t.edgeValues(&e, cell{pos, w.posT}, cell{pen, w.penT}, cell{lit, w.litT}, &c.Setup, &f)
			c.Edges = append(c.Edges, e)
			titles = append(titles, [4]string{w.posT, w.posT, w.penT, w.litT})
		}
		if len(c.Edges) == 0 && len(f) == 0 {
			f.Add("", "no edge column is filled (%s); the row holds no result", t.edgeTitles())
		}
	} else {
		ec := t.get(rec, "edge")
		e := halfmark.EdgeResult{Edge: ec.v}
		pc := t.get(rec, "position_mm")
		if pc.v == "" {
			f.Add(pc.column, "is empty; a number is required")
		}
		t.edgeValues(&e, pc, t.get(rec, "penumbra_mm"), t.get(rec, "light_position_mm"), &c.Setup, &f)
		c.Edges = []halfmark.EdgeResult{e}
		titles = [][4]string{{ec.column, pc.column, t.title["penumbra_mm"], t.title["light_position_mm"]}}
	}
	if len(f) > 0 {
		return row, f
	}
	// Machine and beam ids are resolved later; stand-ins keep Validate quiet about them.
	c.MachineID, c.BeamID = 1, 1
	for _, fe := range c.Validate("", t.now) {
		fe.Field = t.columnOf(fe.Field, titles)
		f = append(f, fe)
	}
	c.MachineID, c.BeamID = 0, 0
	if c.Kind == "" && kc.v == "" {
		f.Add(kc.column, "is empty; give the kind (morning, monthly, annual, commissioning, post-service) or a constant")
	}
	return row, f
}

func (t *tableReader) edgeTitles() string {
	s := make([]string, len(t.edges))
	for i, w := range t.edges {
		s[i] = w.posT
	}
	return quoteAll(s)
}

func cellAt(rec []string, i int) string {
	if i < 0 || i >= len(rec) {
		return ""
	}
	return strings.TrimSpace(rec[i])
}

// columnOf turns a Validate field name into the column it came from.
func (t *tableReader) columnOf(field string, titles [][4]string) string {
	if rest, ok := strings.CutPrefix(field, "edges["); ok {
		i, after, _ := strings.Cut(rest, "].")
		n, err := strconv.Atoi(i)
		if err == nil && n < len(titles) {
			switch after {
			case "edge":
				return titles[n][0]
			case "position_mm":
				return titles[n][1]
			case "penumbra_mm":
				return titles[n][2]
			case "light_position_mm":
				return titles[n][3]
			}
		}
		return field
	}
	field = strings.TrimPrefix(field, "setup.")
	if s, ok := t.title[field]; ok {
		return s
	}
	if field == "measured_at" {
		if s, ok := t.title["date"]; ok {
			return s
		}
	}
	if _, ok := t.consts[field]; ok {
		return "constant " + field
	}
	return field
}

// when reads the check time from measured_at, or date (+ time).
func (t *tableReader) when(rec []string, f *halfmark.Fields) time.Time {
	at := t.get(rec, "measured_at")
	if at.v == "" {
		at = t.get(rec, "date")
	}
	if at.v == "" {
		f.Add(at.column, "is empty; a date is required")
		return time.Time{}
	}
	ts, err := parseTime(at.v, t.datefm, t.loc)
	if err != nil {
		f.Add(at.column, "%v", err)
		return time.Time{}
	}
	if tc := t.get(rec, "time"); tc.v != "" {
		d, err := parseClock(tc.v)
		if err != nil {
			f.Add(tc.column, "%v", err)
			return time.Time{}
		}
		if ts.Hour() != 0 || ts.Minute() != 0 || ts.Second() != 0 {
			f.Add(tc.column, "the date column %q already holds a time of day", at.v)
			return time.Time{}
		}
		s := int(d / time.Second)
		ts = time.Date(ts.Year(), ts.Month(), ts.Day(), s/3600, s/60%60, s%60, 0, ts.Location())
	}
	return ts
}

// edgeValues reads an edge's position, penumbra and light-field edge in
// mm. A value whose cell carries no unit is in the mapping's units; one
// that reads like cm where mm is expected is refused (see looksLikeCm).
func (t *tableReader) edgeValues(e *halfmark.EdgeResult, pos, pen, lit cell, s *halfmark.Setup, f *halfmark.Fields) {
	read := func(c cell, isPenumbra bool) *float64 {
		if c.v == "" {
			return nil
		}
		v, unit, err := parseNumber(c.v, t.dec)
		if err == nil {
			implicit := unit == ""
			v, err = lengthMM(v, unit, t.m.Units)
			if err == nil && implicit && t.m.Units == "mm" {
				err = looksLikeCm(e.Edge, v, isPenumbra, s)
			}
		}
		if err != nil {
			f.Add(c.column, "%v", err)
			return nil
		}
		return &v
	}
	if p := read(pos, false); p != nil {
		e.PositionMM = *p
	}
	e.PenumbraMM = read(pen, true)
	e.LightPositionMM = read(lit, false)
}

// Below minPenumbraMM no photon-beam 80–20 penumbra lies (common
// practice: 2–10 mm at 10 cm depth), so such a value is taken for cm.
const minPenumbraMM = 1.0

// looksLikeCm refuses a value in mm that reads like cm: a penumbra under
// minPenumbraMM, or a jaw position whose magnitude is about a tenth of the
// half field size expected from the nominal field (within 20 %, common
// practice for spotting a unit slip) and far from the half field itself.
func looksLikeCm(edge string, v float64, isPenumbra bool, s *halfmark.Setup) error {
	if isPenumbra {
		if v > 0 && v < minPenumbraMM {
			return fmt.Errorf("%v mm is less than any photon 80–20 penumbra and looks like cm; write the unit in the cell (%v cm) or set units = \"cm\" in the mapping", v, v)
		}
		return nil
	}
	id, err := halfmark.ParseEdge(edge)
	if err != nil || id.Jaw == "" {
		return nil
	}
	field := s.FieldXcm
	if id.Axis() == "Y" {
		field = s.FieldYcm
	}
	if field == nil || *field <= 0 {
		return nil
	}
	half := *field * 10 / 2 // expected |position|, mm
	if math.Abs(math.Abs(v)*10-half) <= 0.2*half && math.Abs(math.Abs(v)-half) > 0.5*half {
		return fmt.Errorf("%v mm looks like cm: a %v cm field has its %s edge near %v mm; write the unit in the cell (%v cm) or set units = \"cm\" in the mapping",
			v, *field, edge, half, v)
	}
	return nil
}
