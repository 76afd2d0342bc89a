package epid

import (
	"errors"
	"slices"
	"testing"
)

func TestLayouts(t *testing.T) {
	// Layout60: 10 × 10 mm + 40 × 5 mm + 10 × 10 mm = 400 mm; Layout80:
	// 80 × 5 mm = 400 mm (arithmetic on the stated layouts).
	if n := len(Layout60.WidthsMM); n != 60 || Layout60.TotalMM() != 400 {
		t.Errorf("Layout60: %d pairs, %g mm", n, Layout60.TotalMM())
	}
	if n := len(Layout80.WidthsMM); n != 80 || Layout80.TotalMM() != 400 {
		t.Errorf("Layout80: %d pairs, %g mm", n, Layout80.TotalMM())
	}
	l, err := ParseLayout("10x10, 40x5 ,10X10")
	if err != nil || !slices.Equal(l.WidthsMM, Layout60.WidthsMM) {
		t.Errorf("ParseLayout = %v, %v; want Layout60's widths", l.WidthsMM, err)
	}
	// Pair 1 (Y2 side) centre at 200 − 5 = 195 mm; pair 11 at 200 − 100 − 2.5 = 97.5 mm.
	for _, c := range []struct {
		i    int
		y, w float64
	}{{0, 195, 10}, {10, 97.5, 5}, {30, -2.5, 5}, {59, -195, 10}} {
		y, w := Layout60.PairCentreMM(c.i)
		if y != c.y || w != c.w {
			t.Errorf("pair %d centre %g width %g, want %g, %g", c.i+1, y, w, c.y, c.w)
		}
	}
	for _, bad := range []string{"", "10", "x5", "0x5", "10x-1", "10xabc", "5x5,,", "1000x5"} {
		if _, err := ParseLayout(bad); !errors.Is(err, ErrInvalidOption) {
			t.Errorf("ParseLayout(%q): %v, want ErrInvalidOption", bad, err)
		}
	}
}
