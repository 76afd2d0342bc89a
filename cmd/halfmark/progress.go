package main

import (
	"fmt"
	"io"
	"regexp"
	"sort"
	"strconv"
	"time"

	"halfmark"
)

// progressReader reports how much of a file has been read, at most every
// 200 ms.
type progressReader struct {
	r     io.Reader
	total int64
	n     int64
	w     io.Writer
	label string
	last  time.Time
	shown bool
}

func (p *progressReader) Read(b []byte) (int, error) {
	n, err := p.r.Read(b)
	p.n += int64(n)
	if p.total > 1<<20 && time.Since(p.last) > 200*time.Millisecond {
		p.last = time.Now()
		p.shown = true
		fmt.Fprintf(p.w, "\r%s: %.0f%% (%d of %d MB)", p.label, 100*float64(p.n)/float64(p.total), p.n>>20, p.total>>20)
	}
	return n, err
}

func (p *progressReader) done() {
	if p.shown {
		fmt.Fprintf(p.w, "\r%s: 100%%%20s\n", p.label, "")
	}
}

var checkField = regexp.MustCompile(`^checks\[(\d+)\]\.(?:edges\[(\d+)\]\.)?(.*)$`)

// mapCheckErrors turns field errors of grouped checks back into file lines.
func mapCheckErrors(fields []halfmark.FieldError, lines [][]int) []halfmark.FieldError {
	out := make([]halfmark.FieldError, 0, len(fields))
	for _, f := range fields {
		m := checkField.FindStringSubmatch(f.Field)
		if m == nil {
			out = append(out, f)
			continue
		}
		i, _ := strconv.Atoi(m[1])
		line := lines[i][0]
		if m[2] != "" {
			j, _ := strconv.Atoi(m[2])
			line = lines[i][j]
		}
		out = append(out, halfmark.FieldError{Line: line, Field: m[3], Message: f.Message})
	}
	return out
}

// dropBad removes the checks that have a field error.
func dropBad(checks []halfmark.Check, lines [][]int, fields []halfmark.FieldError) ([]halfmark.Check, [][]int) {
	badIdx := map[int]bool{}
	for _, f := range fields {
		if m := checkField.FindStringSubmatch(f.Field); m != nil {
			i, _ := strconv.Atoi(m[1])
			badIdx[i] = true
		}
	}
	var cs []halfmark.Check
	var ls [][]int
	for i := range checks {
		if !badIdx[i] {
			cs = append(cs, checks[i])
			ls = append(ls, lines[i])
		}
	}
	return cs, ls
}

func sortByLine(fs []halfmark.FieldError) {
	sort.SliceStable(fs, func(i, j int) bool { return fs[i].Line < fs[j].Line })
}
