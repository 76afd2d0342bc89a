package spc_test

import (
	"fmt"

	"halfmark/analysis/spc"
)

// Montgomery, Introduction to Statistical Quality Control, Example 9.1: the
// tabular CUSUM (μ0 = 10, σ = 1, k = 0.5, h = 5) signals at sample 29; the
// shift began after sample 22 and the new mean is about 11.25.
func ExampleCUSUM() {
	x := []float64{9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.20, 10.34,
		9.03, 11.47, 10.51, 9.40, 10.08, 9.37, 10.62, 10.31, 8.52, 10.84,
		10.90, 9.33, 12.29, 11.50, 10.60, 11.08, 10.38, 11.62, 11.31, 10.52}
	r, err := spc.CUSUM(x, spc.CUSUMOptions{Target: 10, Sigma: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	i := r.FirstSignal
	fmt.Printf("signal at sample %d, C+ = %.2f, N+ = %d, new mean %.2f\n", i+1, r.CPlus[i], r.NPlus[i], r.NewMean[i])
	// Output: signal at sample 29, C+ = 5.28, N+ = 7, new mean 11.25
}

// NIST/SEMATECH e-Handbook §6.3.2.2: individuals limits with table constants.
func ExampleIMR() {
	x := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	r, err := spc.IMR(x, spc.IMROptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("centre %.2f, MR̄ %.4f, limits %.4f to %.4f, first signal %d\n", r.Centre, r.MRBar, r.LCL, r.UCL, r.FirstSignal)
	// Output: centre 50.81, MR̄ 1.8778, limits 45.8159 to 55.8041, first signal -1
}
