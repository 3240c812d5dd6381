package elasticity_test

import (
	"fmt"

	"gonum.org/v1/gonum/mat"

	"priceiv/elasticity"
)

// The inverse-elasticity rule: a seller facing constant-elasticity demand
// with elasticity e < -1 maximises profit where the Lerner index
// (p - mc)/p equals -1/e.
func ExampleLerner() {
	for _, e := range []float64{-2, -3, -1.5, -0.8} {
		fmt.Printf("e = %4.1f  L = %.3f\n", e, elasticity.Lerner(e))
	}
	// Output:
	// e = -2.0  L = 0.500
	// e = -3.0  L = 0.333
	// e = -1.5  L = 0.667
	// e = -0.8  L = NaN
}

// A cold-brew can costs 1.20 to make and sell one more of. The
// profit-maximising price is c·e/(1+e): twice the cost at e = -2, one and a
// half times at e = -3, three times at e = -1.5.
func ExampleProfitMaxPrice() {
	const unitCost = 1.20
	for _, e := range []float64{-2, -3, -1.5} {
		fmt.Printf("e = %4.1f  p* = %.2f\n", e, elasticity.ProfitMaxPrice(unitCost, e))
	}
	// Output:
	// e = -2.0  p* = 2.40
	// e = -3.0  p* = 1.80
	// e = -1.5  p* = 3.60
}

// The marginal cost at which today's shelf price of 2.49 would be the
// profit-maximising one, for an estimated elasticity of -2.4.
func ExampleImpliedMarginalCost() {
	fmt.Printf("%.3f\n", elasticity.ImpliedMarginalCost(2.49, -2.4))
	// Output:
	// 1.452
}

// Margins with bands: the band of the elasticity is carried through each
// (monotone) transform, and a Wald band adds delta-method standard errors.
func ExampleMarkupOf() {
	e := elasticity.OwnElasticity{Product: "oat_latte_can", E: -2.5, Lo: -3.5, Hi: -1.5, SE: 0.5, Band: "Wald"}
	m := elasticity.MarkupOf(e, 2.49, 1.10)
	fmt.Printf("Lerner index  %.3f (%.3f to %.3f), s.e. %.3f\n", m.Lerner.Est, m.Lerner.Lo, m.Lerner.Hi, m.LernerSE)
	fmt.Printf("marginal cost %.2f (%.2f to %.2f)\n", m.MarginalCost.Est, m.MarginalCost.Lo, m.MarginalCost.Hi)
	fmt.Printf("best price    %.2f (%.2f to %.2f)\n", m.ProfitMaxPrice.Est, m.ProfitMaxPrice.Lo, m.ProfitMaxPrice.Hi)

	inelastic := elasticity.MarkupOf(elasticity.OwnElasticity{Product: "black_bottle", E: -0.8, Lo: -1.2, Hi: -0.4}, 3.10, 1.30)
	fmt.Println(inelastic.Regime, inelastic.Lerner.Est)
	// Output:
	// Lerner index  0.400 (0.286 to 0.667), s.e. 0.080
	// marginal cost 1.49 (0.83 to 1.78)
	// best price    1.83 (1.54 to 3.30)
	// inelastic NaN
}

// Two products of one owner that are substitutes: solving the owner's
// first-order conditions together gives higher margins than the
// product-by-product rule (1/3 and 0.4 here), because a higher price on
// one sends buyers to the other.
func ExampleProductLineMarkups() {
	pl := elasticity.ProductLine{
		Products: []string{"oat_latte_can", "black_can"},
		// Rows: units of; columns: price of.
		E:        mat.NewDense(2, 2, []float64{-3, 0.5, 0.4, -2.5}),
		Price:    []float64{2, 4},
		Quantity: []float64{100, 50},
	}
	res, err := elasticity.ProductLineMarkups(pl)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, r := range res.Rows {
		fmt.Printf("%-14s L = %.4f  mc = %.4f\n", r.Product, r.Lerner.Est, r.MarginalCost.Est)
	}
	// Output:
	// oat_latte_can  L = 0.3973  mc = 1.2055
	// black_can      L = 0.4795  mc = 2.0822
}

// A what-if under constant elasticities: raise the oat latte can by 10%
// and watch both products, q'_i = q_i Π_j (p'_j/p_j)^e_ij.
func ExampleSimulate() {
	products := []string{"oat_latte_can", "black_bottle"}
	est := &elasticity.Estimates{
		Products: products,
		E:        mat.NewDense(2, 2, []float64{-2, 0.5, 0.3, -3}),
		Cross:    true,
	}
	base := elasticity.Baseline{
		Price:    []float64{2.00, 4.00},
		Quantity: []float64{1000, 500},
		UnitCost: []float64{1.20, 2.50},
	}
	c, err := elasticity.ParseChange("oat_latte_can=+10%", products)
	if err != nil {
		fmt.Println(err)
		return
	}
	sim, err := elasticity.Simulate(est, base, []elasticity.Change{c})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, r := range sim.Rows {
		fmt.Printf("%-14s %.2f → %.2f  units %+7.1f  revenue %+7.1f  contribution %+6.1f\n",
			r.Product, r.Price, r.NewPrice, r.UnitsChange.Est, r.RevenueChange.Est, r.ContributionChange.Est)
	}
	fmt.Printf("whole line: revenue %+.1f (%+.2f%%), contribution %+.1f (%+.2f%%)\n",
		sim.Total.RevenueChange.Est, sim.Total.RevenuePct.Est, sim.Total.ContributionChange.Est, sim.Total.ContributionPct.Est)
	// Output:
	// oat_latte_can  2.00 → 2.20  units  -173.6  revenue  -181.8  contribution  +26.4
	// black_bottle   4.00 → 4.00  units   +14.5  revenue   +58.0  contribution  +21.8
	// whole line: revenue -123.8 (-3.10%), contribution +48.2 (+3.11%)
}

// Price moves are written PRODUCT=+5%, PRODUCT=-3% or PRODUCT=4.20;
// anything else gets an error that shows the forms.
func ExampleParseChange() {
	products := []string{"oat_latte_can", "black_bottle"}
	for _, s := range []string{"oat_latte_can=+5%", "black_bottle=2.99", "espresso=+5%"} {
		c, err := elasticity.ParseChange(s, products)
		if err != nil {
			fmt.Println("error:", err)
			continue
		}
		fmt.Printf("%s: new price %.2f from 2.49\n", c.Product, c.Apply(2.49))
	}
	// Output:
	// oat_latte_can: new price 2.61 from 2.49
	// black_bottle: new price 2.99 from 2.49
	// error: unknown product "espresso" in price change "espresso=+5%"; the products are "oat_latte_can", "black_bottle"
}
