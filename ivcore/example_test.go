package ivcore_test

import (
	"fmt"
	"math"
	"math/rand/v2"

	"priceiv/ivcore"
)

// ExampleEstimate fits log-log demand by 2SLS on a small generated market
// where the price responds to the demand shock, and compares it with OLS.
// The true elasticity is -2; the cost shifter moves price through supply.
func ExampleEstimate() {
	rng := rand.New(rand.NewPCG(1, 2))
	n := 5000
	lq, lp, one, cost := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range lq {
		u := 0.3 * rng.NormFloat64()
		cost[i] = rng.NormFloat64()
		lp[i] = 1 + 0.5*cost[i] + 0.5*u + 0.1*rng.NormFloat64()
		lq[i] = 5 - 2*lp[i] + u
		one[i] = 1
	}
	m := ivcore.Accumulate([][]float64{lq, lp, one, cost}, []string{"log units", "log price", "intercept", "bean cost"}, nil, 0)
	md := ivcore.Model{Y: 0, Endog: []int{1}, Exog: []int{2}, Instr: []int{3}}
	for _, est := range []ivcore.Estimator{ivcore.OLS, ivcore.TSLS} {
		f, err := ivcore.Estimate(m, md, est, ivcore.HC1)
		if err != nil {
			fmt.Println(err)
			return
		}
		lo, hi := f.ConfInt(0, 0.95)
		fmt.Printf("%-4s elasticity %.2f, band %.2f to %.2f\n", est, f.Coef[0], lo, hi)
	}
	// Output:
	// ols  elasticity -1.85, band -1.86 to -1.83
	// 2sls elasticity -2.01, band -2.02 to -1.99
}

// ExampleAbsorb projects store and week effects out of a column: what is
// left has zero mean within every store and every week. In a balanced
// two-way table it is x - row mean - column mean + grand mean (checked by
// hand: 2.0 - 2.1 - 2.5 + 2.6 = 0).
func ExampleAbsorb() {
	store := []int32{0, 0, 0, 1, 1, 1}
	week := []int32{0, 1, 2, 0, 1, 2}
	price := []float64{2.0, 2.2, 2.1, 3.0, 3.3, 3.0}
	effects := []ivcore.Effect{{Name: "store", Codes: store, Levels: 2}, {Name: "week", Codes: week, Levels: 3}}
	dst := make([][]float64, 1)
	ab, err := ivcore.Absorb(dst, [][]float64{price}, effects, ivcore.AbsorbOptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	for i, v := range dst[0] {
		if i > 0 {
			fmt.Print(" ")
		}
		fmt.Printf("%.3f", math.Round(v*1e9)/1e9+0) // +0 turns -0 into 0
	}
	fmt.Printf("\nabsorbed parameters: %d, converged: %v\n", ab.DoF, ab.Converged)
	// Output:
	// 0.000 -0.050 0.050 0.000 0.050 -0.050
	// absorbed parameters: 4, converged: true
}
