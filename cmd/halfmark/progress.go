package main

import (
	"fmt"
	"io"
	"time"
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
