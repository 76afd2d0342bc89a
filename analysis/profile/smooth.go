package profile

// MaxSmoothPasses is the largest Options.SmoothPasses accepted.
const MaxSmoothPasses = 5

// smooth applies passes of a light 3-point smoothing kernel in place:
//
//	s_i = (y_i + L_i) / 2,  L_i = y_{i−1} + (y_{i+1} − y_{i−1})·(x_i − x_{i−1})/(x_{i+1} − x_{i−1})
//
// L_i is the straight line through the two neighbours, so straight lines pass
// unchanged at any spacing; on even spacing the kernel is the binomial
// (1, 2, 1)/4, which cuts white-noise σ to √(3/8) ≈ 0.61 of its value and
// biases a curved profile by h²·y”/4 per pass (h the spacing) (derived). The
// end samples are left as they are.
func (c *curve) smooth(passes int) {
	x, y := c.x, c.y
	for range passes {
		prev := y[0]
		for i := 1; i+1 < len(y); i++ {
			w := (x[i] - x[i-1]) / (x[i+1] - x[i-1])
			line := prev + w*(y[i+1]-prev)
			prev = y[i]
			y[i] = 0.5 * (y[i] + line)
		}
	}
}
