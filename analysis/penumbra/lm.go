package penumbra

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/mat"
)

// residualFunc gives, for parameters θ and observation i, the model value
// and its gradient ∂f/∂θ (written into grad).
type residualFunc func(theta []float64, i int, grad []float64) float64

// lmResult is a converged least-squares fit.
type lmResult struct {
	theta []float64
	ss    float64    // Σ w_i (y_i − f_i)²
	jtwj  *mat.Dense // JᵀWJ at the solution
}

// errSingular says the data do not determine every parameter.
var errSingular = errors.New("the data do not determine every parameter")

// levenbergMarquardt minimises Σ w_i (y_i − f(θ, i))² from theta0 by
// Levenberg–Marquardt steps (JᵀWJ + λ·diag(JᵀWJ))δ = JᵀW(y − f)
// (Marquardt, J SIAM 11:431, 1963 — from memory). w nil means equal
// weights.
func levenbergMarquardt(y, w []float64, theta0 []float64, f residualFunc) (lmResult, error) {
	p := len(theta0)
	theta := append([]float64(nil), theta0...)
	grad := make([]float64, p)
	weight := func(i int) float64 {
		if w == nil {
			return 1
		}
		return w[i]
	}
	ssAt := func(th []float64) float64 {
		var s float64
		for i := range y {
			r := y[i] - f(th, i, grad)
			s += weight(i) * r * r
		}
		return s
	}
	normal := func(th []float64) (*mat.Dense, *mat.VecDense) {
		a := mat.NewDense(p, p, nil)
		b := mat.NewVecDense(p, nil)
		for i := range y {
			r := y[i] - f(th, i, grad)
			wi := weight(i)
			for j := 0; j < p; j++ {
				b.SetVec(j, b.AtVec(j)+wi*grad[j]*r)
				for k := 0; k < p; k++ {
					a.Set(j, k, a.At(j, k)+wi*grad[j]*grad[k])
				}
			}
		}
		return a, b
	}
	ss := ssAt(theta)
	lambda := 1e-3
	trial := make([]float64, p)
	for iter, converged := 0, false; iter < 200 && !converged; iter++ {
		a, b := normal(theta)
		improved := false
		for try := 0; try < 30; try++ {
			d := mat.NewDense(p, p, nil)
			d.Copy(a)
			for j := 0; j < p; j++ {
				d.Set(j, j, a.At(j, j)*(1+lambda)+1e-12)
			}
			var step mat.VecDense
			if err := step.SolveVec(d, b); err != nil {
				lambda *= 10
				continue
			}
			for j := range trial {
				trial[j] = theta[j] + step.AtVec(j)
			}
			nss := ssAt(trial)
			if nss <= ss {
				converged = ss-nss <= 1e-14*(1+ss)
				copy(theta, trial)
				ss = nss
				lambda = math.Max(lambda/10, 1e-12)
				improved = true
				break
			}
			lambda *= 10
		}
		if !improved {
			break
		}
	}
	a, _ := normal(theta)
	if math.IsNaN(ss) {
		return lmResult{}, errSingular
	}
	return lmResult{theta: theta, ss: ss, jtwj: a}, nil
}

// covariance returns s²·(JᵀWJ)⁻¹, or errSingular when JᵀWJ is (nearly)
// singular.
func (r lmResult) covariance(s2 float64) (*mat.Dense, error) {
	var c mat.Dense
	if err := c.Inverse(r.jtwj); err != nil {
		return nil, errSingular
	}
	if cond := mat.Cond(r.jtwj, 2); cond > 1e12 || math.IsInf(cond, 0) {
		return nil, errSingular
	}
	c.Scale(s2, &c)
	return &c, nil
}
