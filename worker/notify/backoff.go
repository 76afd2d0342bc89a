package notify

import "time"

// backoff is the delay before the next attempt after failures failed
// attempts (failures ≥ 1), exponential with "equal jitter" and capped:
//
//	d     = min(maxDelay, base · 2^(failures−1))
//	delay = d/2 + u · d/2,   u ∈ [0, 1) uniform
//
// so the delay lies in [d/2, d) and never exceeds maxDelay. The jitter
// spreads the retries of many rows that failed together (the "equal jitter"
// variant of M. Brooker, "Exponential Backoff And Jitter", AWS Architecture
// Blog, 2015).
func backoff(failures int, base, maxDelay time.Duration, u float64) time.Duration {
	if failures < 1 {
		failures = 1
	}
	d := base
	for i := 1; i < failures && d < maxDelay; i++ {
		d *= 2 // d < maxDelay ≤ MaxInt64/2 in practice; the cap below holds anyway
	}
	if d > maxDelay || d <= 0 {
		d = maxDelay
	}
	if u < 0 {
		u = 0
	}
	if u >= 1 {
		u = 0.999999
	}
	half := d / 2
	return half + time.Duration(u*float64(d-half))
}
