package sheet

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// Date formats a mapping may name for slash dates; dotted and ISO 8601
// dates need none.
const (
	DateDMY = "DD/MM/YYYY"
	DateMDY = "MM/DD/YYYY"
)

// spreadsheetEpoch is day 0 of the 1900 date system as spreadsheet
// programs count it (serial 1 = 1900-01-01, with the fictitious
// 1900-02-29 counted, so serials from 61 on are days since 1899-12-30;
// ECMA-376 Part 1, §18.17.4.1). Serials before 61 are not accepted.
var spreadsheetEpoch = time.Date(1899, 12, 30, 0, 0, 0, 0, time.UTC)

// Serial dates accepted: 1990-01-01 (32874) to 2099-12-31 (73415).
const minSerial, maxSerial = 32874, 73416

// parseTime reads a date-time cell. Accepted: ISO 8601 (2024-03-04,
// 2024-03-04T07:41[:05][Z|+01:00], 2024-03-04 07:41), DD.MM.YYYY [HH:MM[:SS]],
// slash dates only with dateFormat DateDMY or DateMDY (never guessed), and
// spreadsheet serial dates (45355.32 = 2024-03-04 07:40:48). Times without
// a zone are in loc.
func parseTime(s, dateFormat string, loc *time.Location) (time.Time, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return time.Time{}, fmt.Errorf("is empty; a date is required")
	}
	if v, err := strconv.ParseFloat(strings.Replace(s, ",", ".", 1), 64); err == nil {
		return serialTime(v, loc)
	}
	var layouts []string
	switch {
	case len(s) >= 10 && s[4] == '-':
		for _, l := range []string{time.RFC3339Nano, "2006-01-02 15:04:05Z07:00", "2006-01-02 15:04Z07:00", "2006-01-02T15:04Z07:00"} {
			if t, err := time.Parse(l, s); err == nil {
				return t, nil
			}
		}
		layouts = []string{"2006-01-02T15:04:05.999999999", "2006-01-02 15:04:05.999999999", "2006-01-02T15:04", "2006-01-02 15:04", "2006-01-02"}
	case strings.Contains(s, "."):
		layouts = []string{"2.1.2006 15:04:05", "2.1.2006 15:04", "2.1.2006"}
	case strings.Contains(s, "/"):
		switch dateFormat {
		case DateDMY:
			layouts = []string{"2/1/2006 15:04:05", "2/1/2006 15:04", "2/1/2006"}
		case DateMDY:
			layouts = []string{"1/2/2006 15:04:05", "1/2/2006 15:04", "1/2/2006", "1/2/2006 3:04 PM", "1/2/2006 3:04:05 PM"}
		default:
			return time.Time{}, fmt.Errorf("%q may be DD/MM/YYYY or MM/DD/YYYY; say which with date_format in the mapping (or --date-format)", s)
		}
	}
	for _, l := range layouts {
		if t, err := time.ParseInLocation(l, s, loc); err == nil {
			return t, nil
		}
	}
	return time.Time{}, fmt.Errorf("%q is not a date like 2024-03-04T07:41:00Z, 2024-03-04 07:41 or 04.03.2024 07:41", s)
}

// serialTime converts a spreadsheet serial date (days since 1899-12-30,
// the fraction being the time of day) to a time in loc, rounded to the
// second.
func serialTime(v float64, loc *time.Location) (time.Time, error) {
	if !(v >= minSerial && v < maxSerial) {
		return time.Time{}, fmt.Errorf("%v is not a date: as a spreadsheet serial date it is outside 1990–2099", v)
	}
	days := math.Floor(v)
	secs := math.Round((v - days) * 86400)
	d := spreadsheetEpoch.AddDate(0, 0, int(days))
	return time.Date(d.Year(), d.Month(), d.Day(), 0, 0, int(secs), 0, loc), nil
}

// parseClock reads a separate time-of-day cell: "07:41", "07:41:05",
// "7:41 AM" or a spreadsheet day fraction (0.32).
func parseClock(s string) (time.Duration, error) {
	s = strings.TrimSpace(s)
	if v, err := strconv.ParseFloat(strings.Replace(s, ",", ".", 1), 64); err == nil {
		if v < 0 || v >= 1 {
			return 0, fmt.Errorf("%q is not a time of day (a fraction of a day from 0 to 1, or HH:MM)", s)
		}
		return time.Duration(math.Round(v*86400)) * time.Second, nil
	}
	for _, l := range []string{"15:04:05", "15:04", "3:04 PM", "3:04:05 PM"} {
		if t, err := time.Parse(l, s); err == nil {
			return time.Duration(t.Hour())*time.Hour + time.Duration(t.Minute())*time.Minute + time.Duration(t.Second())*time.Second, nil
		}
	}
	return 0, fmt.Errorf("%q is not a time of day like 07:41", s)
}
