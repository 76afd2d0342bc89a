package sheet

import (
	"fmt"
	"strconv"
	"strings"
)

// Decimal marks.
const (
	DecimalAuto  = "auto"
	DecimalPoint = "point"
	DecimalComma = "comma"
	decimalAny   = "any" // XLSX: a lone '.' or ',' is the decimal mark
)

// parseNumber reads a number written with the given decimal mark
// (DecimalPoint, DecimalComma or decimalAny) and an optional unit after it
// ("50.2 mm", "5,02 cm", "−3"). Thousands separators are refused: no value
// Halfmark stores needs one, and "1,234" is ambiguous.
func parseNumber(s, decimal string) (v float64, unit string, err error) {
	s = strings.TrimSpace(strings.ReplaceAll(s, "\u00a0", " "))
	s = strings.ReplaceAll(s, "\u2212", "-") // Unicode minus sign
	last := strings.LastIndexAny(s, "0123456789")
	if last < 0 {
		return 0, "", fmt.Errorf("%q is not a number", s)
	}
	num, unit := strings.TrimSpace(s[:last+1]), strings.TrimSpace(s[last+1:])
	points, commas := strings.Count(num, "."), strings.Count(num, ",")
	switch {
	case points+commas > 1:
		return 0, "", fmt.Errorf("%q has more than one decimal mark; write it without thousands separators", s)
	case decimal == DecimalPoint && commas > 0:
		return 0, "", fmt.Errorf("%q has a decimal comma but the file is read with a decimal point; set decimal = \"comma\" (or --decimal comma)", s)
	case decimal == DecimalComma && points > 0:
		return 0, "", fmt.Errorf("%q has a decimal point but the file is read with a decimal comma; set decimal = \"point\" (or --decimal point)", s)
	}
	if commas > 0 {
		num = strings.Replace(num, ",", ".", 1)
	}
	v, perr := strconv.ParseFloat(num, 64)
	if perr != nil || v != v || v > 1e300 || v < -1e300 {
		return 0, "", fmt.Errorf("%q is not a finite number", s)
	}
	return v, strings.ToLower(unit), nil
}

// decimalShape says which decimal mark a cell shows: '.' for "50.2", ','
// for "50,2", 0 for neither (an integer, text or both marks).
func decimalShape(s string) byte {
	s = strings.TrimSpace(s)
	p, c := strings.IndexByte(s, '.'), strings.IndexByte(s, ',')
	switch {
	case p >= 0 && c < 0 && p > 0 && p < len(s)-1 && isDigit(s[p-1]) && isDigit(s[p+1]):
		return '.'
	case c >= 0 && p < 0 && c > 0 && c < len(s)-1 && isDigit(s[c-1]) && isDigit(s[c+1]):
		return ','
	}
	return 0
}

func isDigit(b byte) bool { return b >= '0' && b <= '9' }

// lengthMM converts v written in unit (as in the cell; "" when the cell
// carries none) to mm. defaultUnit ("mm" or "cm") applies when the cell
// carries no unit. Any unit other than mm or cm is refused.
func lengthMM(v float64, unit, defaultUnit string) (float64, error) {
	if unit == "" {
		unit = defaultUnit
	}
	switch unit {
	case "mm":
		return v, nil
	case "cm":
		return v * 10, nil
	}
	return 0, fmt.Errorf("the unit %q is not mm or cm; write the value in mm or cm", unit)
}

// lengthCm converts v written in unit ("" when the cell carries none) to
// cm; cm is the default for setup values (SSD, depth, field size).
func lengthCm(v float64, unit string) (float64, error) {
	switch unit {
	case "", "cm":
		return v, nil
	case "mm":
		return v / 10, nil
	}
	return 0, fmt.Errorf("the unit %q is not cm or mm; write the value in cm", unit)
}

// angleDeg accepts a bare number or one followed by "°" or "deg".
func angleDeg(unit string) error {
	switch unit {
	case "", "°", "deg":
		return nil
	}
	return fmt.Errorf("the unit %q is not degrees; write the angle in degrees", unit)
}
