// Package drift is Halfmark's one judge: it turns a machine's QA series
// (edge positions, penumbrae, light offsets in mm) into per-series verdicts
// and per-component findings. Every screen, report and API answer reads what
// it computed; nothing else decides a level or a verdict.
//
// Everything is pure: no I/O, no clock (the caller passes now), no mutable
// state beyond a memo of a pure function (estimated.go). The statistics
// come from package spc.
//
// Entry points:
//
//	EvaluateMachine  every series and every component of one machine
//	EvaluateSeries   one series (its own charts and verdict word)
//	LevelOf          the only level rule (TG-142 limits)
//	Evaluate         the per-series chart engine both use
//
// Levels (Klein et al., AAPM TG-142, Med Phys 36:4197, 2009):
//
//	3  |d| > action limit            d = the quantity's deviation, mm
//	2  |d| > tolerance
//	1  a statistical signal or a projected tolerance crossing within the
//	   horizon
//	0  none of these
//
// Components (halfmark.ComponentsOf): a jaw (every beam, setup and method
// that sees it), an MLC bank (the mean over its leaves), a leaf (its
// residual after the bank mean of the same day), a beam's penumbra (every
// edge) and a jaw's light field. Each component gets one pooled statistic
// per session (UTC calendar day) — the inverse-variance weighted mean of
// its views' deviations — charted with a CUSUM and a Shewhart chart whose
// widths are set for the number of components of the same cadence (daily or
// monthly) on the machine (detection.go), corrected for estimated baselines
// (estimated.go). Levels 2 and 3 come from the limits on the component's own
// quantity; Level 1 from the pooled charts or from the trend since the
// change's onset (machine.go).
//
// Views measured on the same day are assumed independent (each is its own
// exposure or reading in its own check); Detection.ViewCorrelation states
// a shared error when a site has one.
//
// "Beyond" is strict: a value exactly on a limit is inside (spc's
// convention).
package drift
