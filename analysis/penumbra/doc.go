// Package penumbra models a beam's 80–20 penumbra from the geometry of its
// collimators and tells what a change of it is consistent with.
//
// The model (an approximation, common practice: real edges are not exactly
// Gaussian). A Gaussian source of standard deviation σ_s (mm) seen through a
// collimator edge at source-to-collimator distance SCD (cm) blurs the edge,
// at the plane SSD + d, with standard deviation σ_s·M where
//
//	M = (SSD + d − SCD)/SCD
//
// (the geometric penumbra P = S·(SSD + d − SDD)/SDD of Khan, The Physics of
// Radiation Therapy — from memory — with the Gaussian's width in place of
// the source diameter). A Gaussian edge of standard deviation σ has an 80–20
// width of 2·Φ⁻¹(0.8)·σ = 1.6832·σ (derived from the normal quantiles).
// Independent Gaussian blurs add in quadrature, so the measured 80–20
// penumbra of an edge at depth d is modelled as
//
//	P = √((1.6832·σ_s·M)² + R(d)²),   R(d) = r0 + r1·d
//
// with R the radiological (scatter and secondary-electron) part, taken
// linear in depth (common practice; a constant when every setup has the same
// depth). σ_s, r0 and r1 are fitted by weighted least squares
// (Levenberg–Marquardt iterations of the linearised model; Seber and Wild,
// Nonlinear Regression, 1989, ch. 14 — from memory), with standard errors
// from the inverse of JᵀWJ scaled by the residual variance.
//
// The same change of σ_s widens the edges of the collimator nearest the
// source most (largest M); a change of R widens every edge at a depth alike;
// a change seen at one setup only is a matter of the setup or the
// measurement. Classify uses exactly these three signatures.
//
// Everything here is pure: no I/O, no clock.
package penumbra
