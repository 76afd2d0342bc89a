// Package drift turns one QA series (edge positions, field sizes, penumbrae
// in mm) into a verdict: the AAPM TG-142 action level of its newest point,
// the rule that set it, the projected date at which a drift reaches the
// tolerance, and the chart data the dashboard draws.
//
// Everything is pure: no I/O, no clock (the caller passes Options.Now), no
// global state. The statistics come from package spc.
//
// Levels (Klein et al., AAPM TG-142, Med Phys 36:4197, 2009):
//
//	3  |d| > action limit            d = newest value − baseline value, mm
//	2  |d| > tolerance
//	1  a statistical signal on the newest point (Shewhart 3σ, EWMA, CUSUM,
//	   a selected Nelson rule completing there) or a significant trend whose
//	   line reaches the tolerance within the horizon (default 30 days)
//	0  none of these
//
// "Beyond" is strict: a value exactly on a limit is inside (spc's
// convention).
package drift
