package epid

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// LeafLayout describes an MLC's leaf pairs. WidthsMM holds each pair's width
// projected to the isocentre plane, in order from the Y2 side (top of the
// image, row 0) to the Y1 side. Pair numbers count from 1 at the Y2 side.
// The layout is centred on the central axis: its total width is split equally
// on both sides.
type LeafLayout struct {
	Name     string
	WidthsMM []float64
}

// Generic layouts, widths at the isocentre (common practice for 120-leaf and
// 160-leaf MLCs). Check them against the machine's own description.
var (
	// Layout60: 60 pairs, 10 at 10 mm, 40 at 5 mm, 10 at 10 mm (40 cm).
	Layout60 = mustLayout("10x10,40x5,10x10", "60 pairs (10×10 mm, 40×5 mm, 10×10 mm)")
	// Layout80: 80 pairs of 5 mm (40 cm).
	Layout80 = mustLayout("80x5", "80 pairs (80×5 mm)")
)

func mustLayout(spec, name string) LeafLayout {
	l, err := ParseLayout(spec)
	if err != nil {
		panic(err) // programmer error in a built-in spec
	}
	l.Name = name
	return l
}

// ParseLayout reads a site-defined layout written as comma-separated groups
// "COUNTxWIDTH" from the Y2 side, e.g. "10x10,40x5,10x10" (10 pairs of
// 10 mm, 40 of 5 mm, 10 of 10 mm). Widths are mm at the isocentre.
func ParseLayout(spec string) (LeafLayout, error) {
	l := LeafLayout{Name: spec}
	if strings.TrimSpace(spec) == "" {
		return LeafLayout{}, fmt.Errorf("%w: empty leaf layout; write groups like \"10x10,40x5,10x10\" (count x width in mm)", ErrInvalidOption)
	}
	for _, g := range strings.Split(spec, ",") {
		g = strings.TrimSpace(g)
		cs, ws, ok := strings.Cut(strings.ToLower(g), "x")
		if !ok {
			return LeafLayout{}, fmt.Errorf("%w: leaf group %q is not COUNTxWIDTH, e.g. \"40x5\"", ErrInvalidOption, g)
		}
		n, err := strconv.Atoi(strings.TrimSpace(cs))
		if err != nil || n < 1 || n > 200 {
			return LeafLayout{}, fmt.Errorf("%w: leaf group %q: count %q must be a whole number from 1 to 200", ErrInvalidOption, g, cs)
		}
		w, err := strconv.ParseFloat(strings.TrimSpace(ws), 64)
		if err != nil || !(w > 0 && w <= 100) || math.IsInf(w, 0) {
			return LeafLayout{}, fmt.Errorf("%w: leaf group %q: width %q must be a number of mm above 0 and at most 100", ErrInvalidOption, g, ws)
		}
		for range n {
			l.WidthsMM = append(l.WidthsMM, w)
		}
	}
	if len(l.WidthsMM) > 400 {
		return LeafLayout{}, fmt.Errorf("%w: layout %q has %d pairs; at most 400", ErrInvalidOption, spec, len(l.WidthsMM))
	}
	return l, nil
}

// Validate checks that the layout has pairs of positive finite width.
func (l LeafLayout) Validate() error {
	if len(l.WidthsMM) == 0 {
		return fmt.Errorf("%w: leaf layout %q has no pairs; use Layout60, Layout80 or ParseLayout", ErrInvalidOption, l.Name)
	}
	for i, w := range l.WidthsMM {
		if !(w > 0 && w <= 100) {
			return fmt.Errorf("%w: leaf layout %q pair %d width %g mm; must be above 0 and at most 100", ErrInvalidOption, l.Name, i+1, w)
		}
	}
	return nil
}

// TotalMM is the sum of the pair widths.
func (l LeafLayout) TotalMM() float64 {
	t := 0.0
	for _, w := range l.WidthsMM {
		t += w
	}
	return t
}

// PairCentreMM returns the y position (mm at the isocentre, positive toward
// Y2) of the centre of pair i (from 0) and its width.
func (l LeafLayout) PairCentreMM(i int) (yMM, widthMM float64) {
	top := l.TotalMM() / 2
	for _, w := range l.WidthsMM[:i] {
		top -= w
	}
	w := l.WidthsMM[i]
	return top - w/2, w
}
