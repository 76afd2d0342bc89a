package sheet

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/BurntSushi/toml"

	"halfmark"
)

// Layouts a mapping may name.
const (
	LayoutLong = "long" // one row per edge result
	LayoutWide = "wide" // one row per check, a column per edge and quantity
)

// Fields a mapping may give a column or a constant for. position_mm,
// penumbra_mm and light_position_mm are per-row columns of the long
// layout; in the wide layout each edge has its own columns.
var (
	checkFields = []string{"machine", "beam", "kind", "measured_at", "date", "time", "ssd_cm", "depth_cm",
		"field_x_cm", "field_y_cm", "collimator_deg", "gantry_deg", "device", "method", "operator", "note", "id", "supersedes"}
	longFields = []string{"edge", "position_mm", "penumbra_mm", "light_position_mm"}
	// exportOnly are columns the export writes for people to read; the
	// reader accepts and ignores them (the store derives them again).
	exportOnly = []string{"superseded_by", "analysis_version", "created_at", "created_by", "iso_position_mm",
		"baseline_mm", "deviation_mm", "penumbra_deviation_mm"}
)

// Mapping says how to read a sheet. The zero value is not usable; start
// from ParseMapping or DefaultMapping.
type Mapping struct {
	Layout     string // LayoutLong or LayoutWide
	HeaderRow  int    // 1-based row of the column titles; 0: the first non-comment row
	Separator  rune   // 0: detected
	Encoding   string // EncodingAuto, EncodingUTF8 or EncodingWin1252
	Decimal    string // DecimalAuto, DecimalPoint or DecimalComma
	DateFormat string // "", DateDMY or DateMDY
	Timezone   string // IANA name for times without a zone; "" leaves it to the caller
	Units      string // "mm" or "cm": the unit of positions and penumbrae whose cells carry none
	Sheets     []string

	Columns   map[string]string            // field (checkFields, longFields) → column title
	Position  map[string]string            // wide: edge → column title of its position
	Penumbra  map[string]string            // wide: edge → column title of its 80–20 penumbra
	Light     map[string]string            // wide: edge → column title of its light-field edge
	Constants map[string]string            // field → value for every row
	Beams     map[string]string            // beam as written in the sheet → beam label ("6 MV", "10 MV FFF")
	PerSheet  map[string]map[string]string // sheet name → constants for that sheet

	strict bool // the built-in layout: every column must be known
}

// DefaultMapping is the long layout `halfmark import checks FILE` reads
// without a mapping and the export writes: columns named as the fields,
// every column required to be known, times without a zone in UTC.
func DefaultMapping() *Mapping {
	m := &Mapping{Layout: LayoutLong, Encoding: EncodingAuto, Decimal: DecimalAuto, Units: "mm", Timezone: "UTC",
		Columns: map[string]string{}, strict: true}
	for _, f := range append(append([]string{}, checkFields...), longFields...) {
		if f != "date" && f != "time" {
			m.Columns[f] = f
		}
	}
	return m
}

// LongRequired are the columns the default long layout must have.
var LongRequired = []string{"machine", "beam", "kind", "measured_at", "edge", "position_mm"}

// mappingFile is the TOML form of a Mapping.
type mappingFile struct {
	Layout     string                    `toml:"layout"`
	HeaderRow  int                       `toml:"header_row"`
	Separator  string                    `toml:"separator"`
	Encoding   string                    `toml:"encoding"`
	Decimal    string                    `toml:"decimal"`
	DateFormat string                    `toml:"date_format"`
	Timezone   string                    `toml:"timezone"`
	Units      string                    `toml:"units"`
	Sheets     []string                  `toml:"sheets"`
	Columns    map[string]any            `toml:"columns"`
	Constants  map[string]any            `toml:"constants"`
	Beams      map[string]string         `toml:"beams"`
	Sheet      map[string]map[string]any `toml:"sheet"`
}

// ParseMapping reads a mapping file (TOML; the format is in the README,
// "Importing records"). Errors name the key to fix.
func ParseMapping(data []byte) (*Mapping, error) {
	var f mappingFile
	md, err := toml.Decode(string(data), &f)
	if err != nil {
		return nil, fmt.Errorf("the mapping is not valid TOML: %v", err)
	}
	var keys []string
	for _, k := range md.Undecoded() {
		// Tables decoded into maps of any report their inner keys too.
		if len(k) > 1 && (k[0] == "columns" || k[0] == "constants" || k[0] == "sheet") {
			continue
		}
		keys = append(keys, k.String())
	}
	if len(keys) > 0 {
		return nil, fmt.Errorf("the mapping has unknown key(s) %s; known: layout, header_row, separator, encoding, decimal, date_format, timezone, units, sheets, [columns], [constants], [beams], [sheet.NAME]", strings.Join(keys, ", "))
	}
	m := &Mapping{Layout: strings.ToLower(f.Layout), HeaderRow: f.HeaderRow, Encoding: strings.ToLower(f.Encoding),
		Decimal: strings.ToLower(f.Decimal), DateFormat: strings.ToUpper(f.DateFormat), Timezone: f.Timezone,
		Units: strings.ToLower(f.Units), Sheets: f.Sheets, Columns: map[string]string{}, Position: map[string]string{},
		Penumbra: map[string]string{}, Light: map[string]string{}, Constants: map[string]string{}, Beams: map[string]string{},
		PerSheet: map[string]map[string]string{}}
	if m.Layout == "" {
		m.Layout = LayoutLong
	}
	if m.Encoding == "" {
		m.Encoding = EncodingAuto
	}
	if m.Decimal == "" {
		m.Decimal = DecimalAuto
	}
	if m.Units == "" {
		m.Units = "mm"
	}
	switch f.Separator {
	case "":
	case ",", ";":
		m.Separator = rune(f.Separator[0])
	case "\t", "tab", "TAB":
		m.Separator = '\t'
	default:
		return nil, fmt.Errorf("separator = %q: use \",\", \";\" or \"tab\" (or leave it out to detect it)", f.Separator)
	}
	for k, v := range f.Beams {
		if _, _, err := halfmark.ParseBeamLabel(v); err != nil {
			return nil, fmt.Errorf("[beams] %q = %q: %v", k, v, err)
		}
		m.Beams[normBeam(k)] = v
	}
	for k, v := range f.Columns {
		if err := m.addColumn(k, v); err != nil {
			return nil, err
		}
	}
	for k, v := range f.Constants {
		if err := addConstant(m.Constants, "constants", k, v); err != nil {
			return nil, err
		}
	}
	for name, cs := range f.Sheet {
		m.PerSheet[name] = map[string]string{}
		for k, v := range cs {
			if err := addConstant(m.PerSheet[name], "sheet."+strconv.Quote(name), k, v); err != nil {
				return nil, err
			}
		}
	}
	return m, m.check()
}

// addColumn reads one [columns] entry: a field name, an edge name (wide
// position column) or a penumbra/light table of edges.
func (m *Mapping) addColumn(k string, v any) error {
	lk := strings.ToLower(k)
	if t, ok := v.(map[string]any); ok {
		var dst map[string]string
		switch lk {
		case "penumbra", "penumbra_mm":
			dst = m.Penumbra
		case "light", "light_position", "light_position_mm":
			dst = m.Light
		case "position", "position_mm":
			dst = m.Position
		default:
			return fmt.Errorf("[columns] %s: only penumbra.EDGE, light.EDGE and position.EDGE name a column per edge", k)
		}
		for e, title := range t {
			s, ok := title.(string)
			id, err := halfmark.ParseEdge(e)
			if !ok || err != nil {
				return fmt.Errorf("[columns] %s.%s: give an edge (X1, X2, Y1, Y2, B1P23) and a column title in quotes", k, e)
			}
			dst[id.String()] = s
		}
		return nil
	}
	s, ok := v.(string)
	if !ok {
		return fmt.Errorf("[columns] %s: give the column title in quotes (got %v)", k, v)
	}
	if id, err := halfmark.ParseEdge(k); err == nil {
		m.Position[id.String()] = s
		return nil
	}
	if f := canonicalField(lk); f != "" {
		m.Columns[f] = s
		return nil
	}
	return fmt.Errorf("[columns] %s is not a field or an edge; fields: %s, %s; edges: X1, X2, Y1, Y2, B1P23",
		k, strings.Join(checkFields, ", "), strings.Join(longFields, ", "))
}

func canonicalField(k string) string {
	switch k {
	case "position":
		return "position_mm"
	case "penumbra":
		return "penumbra_mm"
	case "light", "light_position":
		return "light_position_mm"
	}
	for _, f := range append(append([]string{}, checkFields...), longFields...) {
		if k == f {
			return f
		}
	}
	return ""
}

func addConstant(dst map[string]string, table, k string, v any) error {
	f := canonicalField(strings.ToLower(k))
	if f == "" || f == "edge" || f == "position_mm" || f == "id" || f == "supersedes" {
		return fmt.Errorf("[%s] %s: a constant may be given for %s", table, k,
			"machine, beam, kind, measured_at, date, time, ssd_cm, depth_cm, field_x_cm, field_y_cm, collimator_deg, gantry_deg, device, operator, note, penumbra_mm, light_position_mm")
	}
	switch x := v.(type) {
	case string:
		dst[f] = x
	case int64:
		dst[f] = strconv.FormatInt(x, 10)
	case float64:
		dst[f] = strconv.FormatFloat(x, 'f', -1, 64)
	case time.Time:
		dst[f] = x.Format(time.RFC3339Nano)
	default:
		return fmt.Errorf("[%s] %s: give a text, a number or a date (got %v)", table, k, v)
	}
	return nil
}

// check refuses mappings that cannot read any row.
func (m *Mapping) check() error {
	switch m.Layout {
	case LayoutLong:
		if len(m.Position) > 0 || len(m.Penumbra) > 0 || len(m.Light) > 0 {
			return fmt.Errorf("layout = \"long\" but [columns] names edges; set layout = \"wide\" for a column per edge")
		}
		for _, f := range []string{"edge", "position_mm"} {
			if m.Columns[f] == "" {
				return fmt.Errorf("layout = \"long\" needs [columns] %s = \"its column title\"", f)
			}
		}
	case LayoutWide:
		if len(m.Position) == 0 {
			return fmt.Errorf("layout = \"wide\" needs at least one edge column in [columns], e.g. X1 = \"X1 (mm)\"")
		}
		for e := range m.Penumbra {
			if m.Position[e] == "" {
				return fmt.Errorf("[columns] penumbra.%s is given but not %s itself; add %s = \"its position column\"", e, e, e)
			}
		}
		for e := range m.Light {
			if m.Position[e] == "" {
				return fmt.Errorf("[columns] light.%s is given but not %s itself; add %s = \"its position column\"", e, e, e)
			}
		}
		for _, f := range longFields {
			if m.Columns[f] != "" {
				return fmt.Errorf("layout = \"wide\" reads edges from their own columns; remove %s from [columns]", f)
			}
		}
	default:
		return fmt.Errorf("layout = %q: use \"long\" (one row per edge) or \"wide\" (one row per check)", m.Layout)
	}
	switch m.Decimal {
	case DecimalAuto, DecimalPoint, DecimalComma:
	default:
		return fmt.Errorf("decimal = %q: use \"point\", \"comma\" or \"auto\"", m.Decimal)
	}
	switch m.DateFormat {
	case "", DateDMY, DateMDY, "ISO", "DD.MM.YYYY":
	default:
		return fmt.Errorf("date_format = %q: use \"DD/MM/YYYY\" or \"MM/DD/YYYY\" (dotted and ISO dates need none)", m.DateFormat)
	}
	switch m.Units {
	case "mm", "cm":
	default:
		return fmt.Errorf("units = %q: use \"mm\" or \"cm\"", m.Units)
	}
	if m.Timezone != "" {
		if _, err := time.LoadLocation(m.Timezone); err != nil {
			return fmt.Errorf("timezone = %q is not an IANA time zone such as Europe/Berlin", m.Timezone)
		}
	}
	switch m.Encoding {
	case EncodingAuto, EncodingUTF8, EncodingWin1252:
	default:
		return fmt.Errorf("encoding = %q: use \"auto\", \"utf-8\" or \"windows-1252\"", m.Encoding)
	}
	if m.Columns["measured_at"] != "" && m.Columns["date"] != "" {
		return fmt.Errorf("[columns] gives both measured_at and date; use measured_at for a date-time column, or date (and time) for separate ones")
	}
	return nil
}

func normBeam(s string) string { return strings.ToUpper(strings.Join(strings.Fields(s), " ")) }

// edgesSorted lists the wide layout's edges in a fixed order.
func (m *Mapping) edgesSorted() []string {
	es := make([]string, 0, len(m.Position))
	for e := range m.Position {
		es = append(es, e)
	}
	sort.Slice(es, func(i, j int) bool { return edgeLess(es[i], es[j]) })
	return es
}

func edgeLess(a, b string) bool {
	ea, _ := halfmark.ParseEdge(a)
	eb, _ := halfmark.ParseEdge(b)
	if (ea.Jaw != "") != (eb.Jaw != "") {
		return ea.Jaw != ""
	}
	if ea.Jaw != "" {
		return ea.Jaw < eb.Jaw
	}
	if ea.Bank != eb.Bank {
		return ea.Bank < eb.Bank
	}
	return ea.LeafPair < eb.LeafPair
}
