package sheet

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"regexp"
	"sort"
	"strconv"
	"strings"

	"github.com/xuri/excelize/v2"

	"halfmark"
)

// Suggest writes a starting mapping (TOML) for a file from the column
// titles it recognises; what it cannot tell is left as commented lines
// for the physicist to fill in. It reads only the header row (of the
// first sheet of a workbook).
func Suggest(data []byte) (string, error) {
	var header []string
	var sep rune
	var sheets []string
	if bytes.HasPrefix(data, []byte("PK\x03\x04")) {
		f, err := excelize.OpenReader(bytes.NewReader(data), xlsxLimits)
		if err != nil {
			return "", fmt.Errorf("the file cannot be opened as an XLSX workbook: %v", err)
		}
		defer f.Close()
		sheets = f.GetSheetList()
		rows, err := f.GetRows(sheets[0], excelize.Options{RawCellValue: true})
		if err != nil {
			return "", err
		}
		for _, r := range rows {
			if !blank(r) {
				header = r
				break
			}
		}
	} else {
		text, err := DecodeText(data, EncodingAuto)
		if err != nil {
			return "", err
		}
		sep = DetectSeparator(text)
		cr := csv.NewReader(strings.NewReader(text))
		cr.Comma, cr.Comment, cr.FieldsPerRecord = sep, '#', -1
		header, err = cr.Read()
		if err != nil {
			return "", fmt.Errorf("the header row cannot be read: %v", err)
		}
	}
	if len(header) == 0 {
		return "", fmt.Errorf("the file has no header row")
	}
	return suggestFrom(header, sep, sheets), nil
}

var (
	reEdge     = regexp.MustCompile(`(?i)^(?:jaw\s*)?([xy][12])\b`)
	rePenumbra = regexp.MustCompile(`(?i)(penumbra|pen|80.?20)`)
	reLight    = regexp.MustCompile(`(?i)(light|lf\b)`)
	reMM       = regexp.MustCompile(`(?i)\(?\bmm\b\)?`)
	reCM       = regexp.MustCompile(`(?i)\(?\bcm\b\)?`)
)

// fieldWords are title words that name a check field (lower case).
var fieldWords = []struct {
	field string
	words []string
}{
	{"measured_at", []string{"measured_at", "date", "datum", "date/time", "datetime", "timestamp", "when"}},
	{"time", []string{"time", "zeit", "uhrzeit"}},
	{"machine", []string{"machine", "linac", "unit", "gerät", "accelerator", "treatment unit"}},
	{"beam", []string{"beam", "energy", "energie", "mv"}},
	{"kind", []string{"kind", "type", "check type", "qa type", "qa"}},
	{"operator", []string{"operator", "by", "initials", "kürzel", "physicist", "therapist", "user", "name"}},
	{"device", []string{"device", "detector", "method"}},
	{"note", []string{"note", "notes", "comment", "comments", "remarks", "bemerkung"}},
	{"ssd_cm", []string{"ssd", "ssd_cm", "ssd (cm)"}},
	{"depth_cm", []string{"depth", "depth_cm", "depth (cm)"}},
	{"field_x_cm", []string{"field x", "field_x_cm", "nominal field x"}},
	{"field_y_cm", []string{"field y", "field_y_cm", "nominal field y"}},
	{"gantry_deg", []string{"gantry", "gantry_deg"}},
	{"collimator_deg", []string{"collimator", "collimator_deg", "coll"}},
	{"edge", []string{"edge"}},
	{"position_mm", []string{"position_mm", "position", "position (mm)"}},
	{"penumbra_mm", []string{"penumbra_mm", "penumbra", "penumbra (mm)"}},
	{"light_position_mm", []string{"light_position_mm", "light position"}},
}

func suggestFrom(header []string, sep rune, sheets []string) string {
	cols := map[string]string{}
	pos, pen, lit := map[string]string{}, map[string]string{}, map[string]string{}
	var unknown []string
	cmSeen := false
	for _, h := range header {
		title := strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		if title == "" {
			continue
		}
		n := normTitle(title)
		matched := false
		for _, fw := range fieldWords {
			for _, w := range fw.words {
				if n == w && cols[fw.field] == "" {
					cols[fw.field], matched = title, true
				}
			}
			if matched {
				break
			}
		}
		if matched {
			continue
		}
		stripped := strings.TrimSpace(rePenumbra.ReplaceAllString(reLight.ReplaceAllString(title, ""), ""))
		if m := reEdge.FindStringSubmatch(stripped); m != nil {
			e := strings.ToUpper(m[1])
			if reCM.MatchString(title) {
				cmSeen = true
			}
			switch {
			case rePenumbra.MatchString(title):
				pen[e] = title
			case reLight.MatchString(title):
				lit[e] = title
			default:
				pos[e] = title
			}
			continue
		}
		if id, err := halfmark.ParseEdge(title); err == nil {
			pos[id.String()] = title
			continue
		}
		unknown = append(unknown, title)
	}
	var b strings.Builder
	b.WriteString("# Halfmark import mapping, suggested from the file's column titles.\n")
	b.WriteString("# Check every line, fill in what is commented out, then:\n#   halfmark import checks --map THIS.toml --dry-run FILE\n\n")
	layout := LayoutLong
	if len(pos) > 0 {
		layout = LayoutWide
	}
	fmt.Fprintf(&b, "layout = %q\n", layout)
	switch sep {
	case ';':
		b.WriteString("separator = \";\"\ndecimal = \"auto\"      # or \"comma\" / \"point\"\n")
	case '\t':
		b.WriteString("separator = \"tab\"\ndecimal = \"auto\"      # or \"comma\" / \"point\"\n")
	case ',':
		b.WriteString("separator = \",\"\n")
	}
	b.WriteString("# date_format = \"DD/MM/YYYY\"   # needed only for slash dates: DD/MM/YYYY or MM/DD/YYYY\n")
	b.WriteString("# timezone = \"Europe/Berlin\"   # for times written without a zone\n")
	if cmSeen {
		b.WriteString("units = \"cm\"   # a title says cm\n")
	} else {
		b.WriteString("units = \"mm\"   # positions and penumbrae without a unit in the cell\n")
	}
	if len(sheets) > 1 {
		fmt.Fprintf(&b, "# sheets = [%s]   # all sheets are read unless named here\n", quoteAll(sheets))
	}
	b.WriteString("\n[columns]\n")
	for _, fw := range fieldWords {
		if t := cols[fw.field]; t != "" {
			fmt.Fprintf(&b, "%s = %s\n", fw.field, strconv.Quote(t))
		}
	}
	for _, e := range sortedKeys(pos) {
		fmt.Fprintf(&b, "%s = %s\n", e, strconv.Quote(pos[e]))
	}
	for _, e := range sortedKeys(pen) {
		fmt.Fprintf(&b, "penumbra.%s = %s\n", e, strconv.Quote(pen[e]))
	}
	for _, e := range sortedKeys(lit) {
		fmt.Fprintf(&b, "light.%s = %s\n", e, strconv.Quote(lit[e]))
	}
	for _, u := range unknown {
		fmt.Fprintf(&b, "# ? = %s   # not recognised; map it to a field or leave it out\n", strconv.Quote(u))
	}
	b.WriteString("\n[constants]\n")
	for _, f := range []string{"machine", "beam", "kind"} {
		if cols[f] == "" {
			fmt.Fprintf(&b, "# %s = \"…\"   # no column found: give it here\n", f)
		}
	}
	if cols["measured_at"] == "" {
		b.WriteString("# no date column found: add [columns] measured_at = \"its title\"\n")
	}
	b.WriteString("# field_x_cm = 10\n# field_y_cm = 10\n")
	b.WriteString("\n[beams]   # beam names in the file → beam labels\n# \"6X\" = \"6 MV\"\n# \"6FFF\" = \"6 MV FFF\"\n")
	return b.String()
}

func sortedKeys(m map[string]string) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	sort.Slice(ks, func(i, j int) bool { return edgeLess(ks[i], ks[j]) })
	return ks
}
