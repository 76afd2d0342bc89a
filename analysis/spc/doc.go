// Package spc holds the statistical process control functions Halfmark uses
// to watch QA series (edge positions and field sizes in mm, penumbra in mm,
// output or symmetry in %): Shewhart individuals and moving-range charts,
// x̄/R charts, EWMA and tabular CUSUM charts, the Nelson run rules, robust and
// least-squares drift trends, and the baseline estimate the charts start
// from.
//
// Every function is pure: no I/O, no clock, no global state. Values keep the
// unit of the series they came from; sigma-scaled parameters (k, h, L) are
// documented as such. Each doc comment states the formula and its published
// source. Bad data (NaN, too few points, zero spread) give an error that names
// the value and says what to fix; a panic means a programming error.
//
// Conventions (pin them when comparing with a published example):
//   - "beyond a limit" is strict: a point exactly on a limit is in control;
//   - I-MR constants are the rounded table values (d2 = 1.128, D4 = 3.267)
//     unless ConstantsExact is asked for;
//   - EWMA limits are time-varying (Montgomery) unless LimitsSteady (NIST);
//   - the CUSUM keeps accumulating after a signal (Montgomery) unless
//     ResetAfterSignal is set.
package spc
