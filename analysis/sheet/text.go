package sheet

import (
	"bytes"
	"errors"
	"fmt"
	"strings"
	"unicode/utf8"
)

// Encodings a text file may be read in.
const (
	EncodingAuto    = "auto"
	EncodingUTF8    = "utf-8"
	EncodingWin1252 = "windows-1252"
)

// win1252High maps bytes 0x80–0x9F of Windows-1252 to Unicode (WHATWG
// Encoding Standard, index-windows-1252); 0 marks the five unassigned
// bytes. Bytes 0xA0–0xFF equal their Unicode code points (ISO 8859-1).
var win1252High = [32]rune{
	0x20AC, 0, 0x201A, 0x0192, 0x201E, 0x2026, 0x2020, 0x2021, 0x02C6, 0x2030, 0x0160, 0x2039, 0x0152, 0, 0x017D, 0,
	0, 0x2018, 0x2019, 0x201C, 0x201D, 0x2022, 0x2013, 0x2014, 0x02DC, 0x2122, 0x0161, 0x203A, 0x0153, 0, 0x017E, 0x0178,
}

// DecodeText returns data as UTF-8 text without a byte-order mark.
// encoding is EncodingAuto (UTF-8 when the bytes are valid UTF-8, else
// Windows-1252), EncodingUTF8 or EncodingWin1252. UTF-16/32 files, files
// with NUL bytes and bytes that Windows-1252 leaves unassigned are refused
// with a message saying how to save the file instead.
func DecodeText(data []byte, encoding string) (string, error) {
	switch {
	case bytes.HasPrefix(data, []byte{0xFF, 0xFE}), bytes.HasPrefix(data, []byte{0xFE, 0xFF}):
		return "", errors.New("the file is UTF-16 text; save it as CSV in UTF-8 (or Windows-1252) and import that")
	case bytes.HasPrefix(data, []byte{0x00, 0x00, 0xFE, 0xFF}):
		return "", errors.New("the file is UTF-32 text; save it as CSV in UTF-8 (or Windows-1252) and import that")
	}
	data = bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	if i := bytes.IndexByte(data, 0); i >= 0 {
		return "", fmt.Errorf("byte %d is a NUL byte: this is not a text file in UTF-8 or Windows-1252 (UTF-16 text or a binary file?); save it as CSV in UTF-8", i+1)
	}
	switch encoding {
	case "", EncodingAuto:
		if utf8.Valid(data) {
			return string(data), nil
		}
		return decode1252(data)
	case EncodingUTF8:
		if !utf8.Valid(data) {
			i := firstInvalidUTF8(data)
			return "", fmt.Errorf("byte %d is not valid UTF-8; the file may be Windows-1252 (use encoding windows-1252 or auto)", i+1)
		}
		return string(data), nil
	case EncodingWin1252:
		return decode1252(data)
	}
	return "", fmt.Errorf("unknown encoding %q: use auto, utf-8 or windows-1252", encoding)
}

func firstInvalidUTF8(b []byte) int {
	for i := 0; i < len(b); {
		r, n := utf8.DecodeRune(b[i:])
		if r == utf8.RuneError && n == 1 {
			return i
		}
		i += n
	}
	return -1
}

func decode1252(data []byte) (string, error) {
	var b []byte
	b = make([]byte, 0, len(data)+len(data)/8)
	for i, c := range data {
		switch {
		case c < 0x80:
			b = append(b, c)
		case c < 0xA0:
			r := win1252High[c-0x80]
			if r == 0 {
				return "", fmt.Errorf("byte %d (0x%02X) is neither UTF-8 nor Windows-1252 text; save the file as CSV in UTF-8", i+1, c)
			}
			b = utf8.AppendRune(b, r)
		default:
			b = utf8.AppendRune(b, rune(c))
		}
	}
	return string(b), nil
}

// DetectSeparator picks the field separator of delimited text from its
// first non-comment line: the most frequent of ',', ';' and tab outside
// double quotes (',' when none occurs: a one-column file).
func DetectSeparator(text string) rune {
	line := firstDataLine(text)
	counts := map[rune]int{}
	inQuote := false
	for _, r := range line {
		switch {
		case r == '"':
			inQuote = !inQuote
		case !inQuote && (r == ',' || r == ';' || r == '\t'):
			counts[r]++
		}
	}
	best, n := ',', 0
	for _, r := range []rune{'\t', ';', ','} {
		if counts[r] > n {
			best, n = r, counts[r]
		}
	}
	return best
}

func firstDataLine(text string) string {
	for text != "" {
		line, rest, _ := strings.Cut(text, "\n")
		text = rest
		if t := strings.TrimSpace(line); t != "" && t[0] != '#' {
			return line
		}
	}
	return ""
}
