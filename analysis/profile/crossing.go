package profile

import (
	"slices"

	"gonum.org/v1/gonum/interp"
)

// cubicInterp holds the monotone piecewise-cubic interpolant of a curve
// (Fritsch and Butland, SIAM J. Sci. Stat. Comput. 5:300, 1984, as
// implemented by gonum/interp). Between two samples it never overshoots
// them, so a level crossing stays between the samples that bracket it.
type cubicInterp struct {
	fb interp.FritschButland
}

// fitCubic switches the curve to monotone cubic interpolation. The curve's
// positions are strictly increasing (newCurve guarantees it), as
// FritschButland.Fit requires.
func (c *curve) fitCubic() {
	c.cubic = &cubicInterp{}
	_ = c.cubic.fb.Fit(c.x, c.y) // always returns nil
}

// at returns the interpolated signal at position x (mm). Outside the samples
// it returns the nearest end value.
func (c *curve) at(x float64) float64 {
	n := len(c.x)
	switch {
	case x <= c.x[0]:
		return c.y[0]
	case x >= c.x[n-1]:
		return c.y[n-1]
	case c.cubic != nil:
		return c.cubic.fb.Predict(x)
	}
	i, _ := slices.BinarySearch(c.x, x) // 1 ≤ i ≤ n−1, c.x[i−1] < x ≤ c.x[i]
	return c.lerp(i-1, x)
}

// atFrom is at for a sequence of nearby positions: *hint is a sample index
// near x and is updated, so a monotone sweep costs O(1) per call.
func (c *curve) atFrom(x float64, hint *int) float64 {
	n := len(c.x)
	if c.cubic != nil || x <= c.x[0] || x >= c.x[n-1] {
		return c.at(x)
	}
	i := min(max(*hint, 0), n-2)
	for i > 0 && c.x[i] > x {
		i--
	}
	for i+2 < n && c.x[i+1] <= x {
		i++
	}
	*hint = i
	return c.lerp(i, x)
}

// lerp interpolates linearly between samples i and i+1.
func (c *curve) lerp(i int, x float64) float64 {
	x0, x1 := c.x[i], c.x[i+1]
	y0, y1 := c.y[i], c.y[i+1]
	return y0 + (y1-y0)*(x-x0)/(x1-x0)
}

// crossOut follows the profile outward from sample index start, towards
// smaller positions (dir −1) or larger ones (dir +1), and returns the
// interpolated position (mm) where it first falls from at or above level to
// below it. ok is false if it never does.
func (c *curve) crossOut(level float64, start, dir int) (x float64, ok bool) {
	y := c.y
	if dir < 0 {
		for i := min(start, len(y)-1); i > 0; i-- {
			if y[i] >= level && y[i-1] < level {
				return c.solve(i-1, level), true
			}
		}
		return 0, false
	}
	for i := max(start, 0); i+1 < len(y); i++ {
		if y[i] >= level && y[i+1] < level {
			return c.solve(i, level), true
		}
	}
	return 0, false
}

// solve returns the position between samples i and i+1, whose signals
// bracket level, where the interpolant equals level. Linear interpolation
// solves directly; the monotone cubic is bisected to 1e-9 mm.
func (c *curve) solve(i int, level float64) float64 {
	x0, x1 := c.x[i], c.x[i+1]
	g0, g1 := c.y[i]-level, c.y[i+1]-level
	if g0 == 0 {
		return x0
	}
	if g1 == 0 {
		return x1
	}
	if c.cubic == nil {
		return x0 + g0*(x1-x0)/(g0-g1)
	}
	for k := 0; k < 100 && x1-x0 > 1e-9; k++ {
		mid := 0.5 * (x0 + x1)
		if gm := c.cubic.fb.Predict(mid) - level; (gm < 0) == (g0 < 0) {
			x0 = mid
		} else {
			x1 = mid
		}
	}
	return 0.5 * (x0 + x1)
}
