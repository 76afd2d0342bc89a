package profile

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/optimize"
)

// Hill is the four-parameter Hill (sigmoid) function used to model one field
// edge, with x the distance from the beam axis (x > 0):
//
//	f(x) = A + (B − A) / (1 + (C/x)^D)
//
// f runs from A near the axis to B far from it; C (same unit as x) is where f
// is half way and D > 1 sets the steepness. For a field edge A is the
// shoulder and B the tail.
type Hill struct {
	A float64 `json:"a"`
	B float64 `json:"b"`
	C float64 `json:"c"`
	D float64 `json:"d"`
}

// At returns f(x). For x ≤ 0 it returns A (the limit as x → 0+).
func (h Hill) At(x float64) float64 {
	return h.A + (h.B-h.A)*h.logistic(x)
}

// logistic returns 1/(1 + (C/x)^D), computed without overflow.
func (h Hill) logistic(x float64) float64 {
	if x <= 0 {
		return 0
	}
	return 1 / (1 + math.Exp(h.D*math.Log(h.C/x)))
}

// Inflection returns the inflection point of f and the value there:
//
//	x_i    = C · ((D − 1)/(D + 1))^(1/D)
//	f(x_i) = A + (B − A)(D − 1)/(2D)
//
// (derived by setting f”(x) = 0; defined for D > 1, C > 0).
func (h Hill) Inflection() (x, f float64) {
	x = h.C * math.Pow((h.D-1)/(h.D+1), 1/h.D)
	f = h.A + (h.B-h.A)*(h.D-1)/(2*h.D)
	return x, f
}

// HillFit is a least-squares Hill fit and its quality.
type HillFit struct {
	Hill
	// RMS is the root-mean-square residual, in the unit of the fitted y.
	RMS float64 `json:"rms"`
	// Points is the number of samples fitted.
	Points int `json:"points"`
}

// minHillPoints is the fewest samples FitHill accepts: four parameters and
// at least one degree of freedom.
const minHillPoints = 5

// maxHillIterations caps the BFGS iterations of FitHill.
const maxHillIterations = 300

// FitHill fits f(x) = A + (B − A)/(1 + (C/x)^D) to the points (x[i], y[i])
// by least squares, starting from guess. It minimises
//
//	S = sum_i (f(x_i) − y_i)²
//
// with BFGS (gonum/optimize) over the parameters (A, B, ln C, ln(D − 1)),
// which keeps C > 0 and D > 1 so the inflection point exists; the gradient is
// analytic. x must be positive and finite (e.g. mm from the axis). FitHill
// panics if len(x) != len(y).
func FitHill(x, y []float64, guess Hill) (HillFit, error) {
	if len(x) != len(y) {
		panic("profile: FitHill: x and y lengths differ")
	}
	if len(x) < minHillPoints {
		return HillFit{}, fmt.Errorf("%w: %d points, need at least %d to fit four Hill parameters", ErrFit, len(x), minHillPoints)
	}
	scale := 0.0
	for i := range x {
		if !(x[i] > 0) || math.IsInf(x[i], 0) || math.IsNaN(y[i]) || math.IsInf(y[i], 0) {
			return HillFit{}, fmt.Errorf("%w: point %d (x %g, y %g): x must be positive and both finite", ErrFit, i, x[i], y[i])
		}
		scale += y[i] * y[i]
	}
	if !(guess.C > 0) || !(guess.D > 1) || math.IsInf(guess.C, 0) || math.IsInf(guess.D, 0) {
		return HillFit{}, fmt.Errorf("%w: starting guess C = %g, D = %g: need C > 0 and D > 1", ErrFit, guess.C, guess.D)
	}
	scale = max(scale, math.SmallestNonzeroFloat64)
	prob := optimize.Problem{
		Func: func(t []float64) float64 { return hillSSE(nil, x, y, t) },
		Grad: func(g, t []float64) { hillSSE(g, x, y, t) },
	}
	init := []float64{guess.A, guess.B, math.Log(guess.C), math.Log(guess.D - 1)}
	settings := &optimize.Settings{
		GradientThreshold: 1e-12 * scale,
		Converger:         &optimize.FunctionConverge{Absolute: 1e-16 * scale, Relative: 1e-12, Iterations: 20},
		// A well-posed edge converges in under 100 iterations; more means the
		// data do not pin the parameters down.
		MajorIterations: maxHillIterations,
		FuncEvaluations: 10 * maxHillIterations,
	}
	res, err := optimize.Minimize(prob, init, settings, &optimize.BFGS{})
	// A line search that cannot improve further at an exact minimum is not a
	// failure; the checks below catch a fit that went astray.
	if err != nil && res == nil {
		return HillFit{}, fmt.Errorf("%w: %v", ErrFit, err)
	}
	if err != nil && !errors.Is(err, optimize.ErrLinesearcherFailure) && !errors.Is(err, optimize.ErrNoProgress) {
		return HillFit{}, fmt.Errorf("%w: optimiser stopped: %v", ErrFit, err)
	}
	if res.Status == optimize.IterationLimit || res.Status == optimize.FunctionEvaluationLimit {
		return HillFit{}, fmt.Errorf("%w: no convergence within %d iterations; the points do not look like one edge", ErrFit, maxHillIterations)
	}
	t := res.X
	h := hillFromParams(t)
	fit := HillFit{Hill: h, RMS: math.Sqrt(res.F / float64(len(x))), Points: len(x)}
	for _, v := range []float64{h.A, h.B, h.C, h.D, fit.RMS} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return HillFit{}, fmt.Errorf("%w: parameters did not converge (A %g, B %g, C %g, D %g)", ErrFit, h.A, h.B, h.C, h.D)
		}
	}
	return fit, nil
}

// hillFromParams maps the optimiser's parameters (A, B, ln C, ln(D − 1)) to a
// Hill.
func hillFromParams(t []float64) Hill {
	return Hill{A: t[0], B: t[1], C: math.Exp(t[2]), D: 1 + math.Exp(t[3])}
}

// hillSSE returns S = sum_i (f(x_i) − y_i)² at parameters t = (A, B, ln C,
// ln(D − 1)) and, if grad is not nil, stores ∂S/∂t in it. With
// g = 1/(1 + r), r = (C/x)^D:
//
//	∂f/∂A = 1 − g,  ∂f/∂B = g,
//	∂f/∂ln C = −(B − A)·D·g(1 − g),
//	∂f/∂ln(D − 1) = −(B − A)·(D − 1)·ln(C/x)·g(1 − g).
func hillSSE(grad, x, y, t []float64) float64 {
	h := hillFromParams(t)
	if grad != nil {
		clear(grad)
	}
	s := 0.0
	for i, xi := range x {
		lr := math.Log(h.C / xi)
		g := 1 / (1 + math.Exp(h.D*lr))
		r := h.A + (h.B-h.A)*g - y[i]
		s += r * r
		if grad != nil {
			grad[0] += 2 * r * (1 - g)
			grad[1] += 2 * r * g
			gg := g * (1 - g) * (h.B - h.A)
			if gg == 0 {
				continue // saturated: no C or D dependence (and ln(C/x) may be infinite)
			}
			grad[2] -= 2 * r * gg * h.D
			grad[3] -= 2 * r * gg * (h.D - 1) * lr
		}
	}
	return s
}
