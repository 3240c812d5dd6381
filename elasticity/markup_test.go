package elasticity

import (
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

// TestInverseElasticityRule checks the textbook inverse-elasticity rule
// (common practice; Tirole 1988, section 1.1): L = -1/e and p* = c e/(1+e).
func TestInverseElasticityRule(t *testing.T) {
	for i, test := range []struct {
		e      float64
		lerner float64 // L = -1/e
		markup float64 // p*/c = e/(1+e)
		tol    float64
		source string
	}{
		{-2, 0.5, 2, 1e-15, "common practice: e = -2 gives L = 0.5 and p* = 2 mc"},
		{-3, 1.0 / 3, 1.5, 1e-15, "common practice: e = -3 gives L = 1/3 and p* = 1.5 mc"},
		{-1.5, 2.0 / 3, 3, 1e-14, "common practice: e = -1.5 gives p* = 3 mc"},
		{-5, 0.2, 1.25, 1e-15, "common practice: e = -5 gives L = 0.2"},
	} {
		if got := Lerner(test.e); !scalar.EqualWithinAbsOrRel(got, test.lerner, test.tol, test.tol) {
			t.Errorf("%d (%s): Lerner = %v, want %v", i, test.source, got, test.lerner)
		}
		const c = 1.8
		if got := ProfitMaxPrice(c, test.e); !scalar.EqualWithinAbsOrRel(got, test.markup*c, test.tol, test.tol) {
			t.Errorf("%d (%s): p* = %v, want %v", i, test.source, got, test.markup*c)
		}
		// The implied marginal cost at p is the cost at which p is optimal.
		const p = 3.2
		mc := ImpliedMarginalCost(p, test.e)
		if got := (p - mc) / p; !scalar.EqualWithinAbsOrRel(got, test.lerner, test.tol, test.tol) {
			t.Errorf("%d: (p - mc)/p = %v, want %v", i, got, test.lerner)
		}
		if got := ProfitMaxPrice(mc, test.e); !scalar.EqualWithinAbsOrRel(got, p, 1e-14, 1e-14) {
			t.Errorf("%d: p*(implied mc) = %v, want the price %v", i, got, p)
		}
	}
}

func TestMarkupOutsideElasticRange(t *testing.T) {
	for _, e := range []float64{-1, -0.6, 0, 0.4, math.NaN()} {
		if !math.IsNaN(Lerner(e)) || !math.IsNaN(ImpliedMarginalCost(2, e)) || !math.IsNaN(ProfitMaxPrice(1, e)) {
			t.Errorf("e = %v: a margin was computed for demand that is not elastic", e)
		}
	}
	if !math.IsNaN(ImpliedMarginalCost(0, -2)) || !math.IsNaN(ProfitMaxPrice(-1, -2)) {
		t.Error("a margin was computed for a non-positive price or cost")
	}
	// Limits at e = -Inf (perfect competition): L = 0, mc = p, p* = c.
	if Lerner(math.Inf(-1)) != 0 || ImpliedMarginalCost(2, math.Inf(-1)) != 2 || ProfitMaxPrice(1.5, math.Inf(-1)) != 1.5 {
		t.Error("limits at e = -Inf are not L = 0, mc = p, p* = c")
	}
}

// TestMarkupOfBands checks that bands are the transformed band ends and
// that the delta-method standard errors equal the numerical derivative
// times the elasticity's standard error (tolerance 1e-6, finite
// differences).
func TestMarkupOfBands(t *testing.T) {
	const p, c = 4.0, 1.5
	in := OwnElasticity{Product: "oat_latte_can", E: -2.5, Lo: -3.5, Hi: -1.5, SE: 0.5, Band: "Wald"}
	m := MarkupOf(in, p, c)
	if m.Regime != Elastic || m.Caution != "" {
		t.Fatalf("regime %v, caution %q", m.Regime, m.Caution)
	}
	for _, test := range []struct {
		name string
		got  Interval
		want Interval
	}{
		// Hand-computed: L = -1/e at -2.5, -3.5, -1.5.
		{"Lerner", m.Lerner, Interval{0.4, 1 / 3.5, 1 / 1.5}},
		// mc = 4(1 + 1/e): decreasing in e, so the low end comes from hi.
		{"marginal cost", m.MarginalCost, Interval{4 * 0.6, 4 * (1 - 1/1.5), 4 * (1 - 1/3.5)}},
		// p* = 1.5 e/(1+e).
		{"profit-max price", m.ProfitMaxPrice, Interval{1.5 * 2.5 / 1.5, 1.5 * 3.5 / 2.5, 1.5 * 1.5 / 0.5}},
	} {
		if !scalar.EqualWithinAbsOrRel(test.got.Est, test.want.Est, 1e-14, 1e-14) ||
			!scalar.EqualWithinAbsOrRel(test.got.Lo, test.want.Lo, 1e-14, 1e-14) ||
			!scalar.EqualWithinAbsOrRel(test.got.Hi, test.want.Hi, 1e-14, 1e-14) {
			t.Errorf("%s: %+v, want %+v", test.name, test.got, test.want)
		}
	}
	const h = 1e-6
	d := func(f func(float64) float64) float64 { return math.Abs(f(in.E+h)-f(in.E-h)) / (2 * h) * in.SE }
	for _, test := range []struct {
		name      string
		got, want float64
	}{
		{"Lerner", m.LernerSE, d(Lerner)},
		{"marginal cost", m.MarginalCostSE, d(func(e float64) float64 { return ImpliedMarginalCost(p, e) })},
		{"profit-max price", m.ProfitMaxPriceSE, d(func(e float64) float64 { return ProfitMaxPrice(c, e) })},
	} {
		if !scalar.EqualWithinAbsOrRel(test.got, test.want, 1e-6, 1e-6) {
			t.Errorf("%s s.e. %v, numerical %v", test.name, test.got, test.want)
		}
	}
	// No unit cost: no profit-maximising price.
	if m := MarkupOf(in, p, math.NaN()); !math.IsNaN(m.ProfitMaxPrice.Est) || !math.IsNaN(m.ProfitMaxPriceSE) {
		t.Error("a profit-maximising price without a unit cost")
	}
	// A band that is not a Wald band gets no standard errors.
	ar := in
	ar.SE, ar.Band, ar.Lo = math.NaN(), "Anderson-Rubin", math.Inf(-1)
	m = MarkupOf(ar, p, c)
	if !math.IsNaN(m.LernerSE) || m.Lerner.Lo != 0 || m.MarginalCost.Hi != p || m.ProfitMaxPrice.Lo != c {
		t.Errorf("unbounded band: %+v %+v %+v", m.Lerner, m.MarginalCost, m.ProfitMaxPrice)
	}
}

func TestMarkupWithheld(t *testing.T) {
	for _, test := range []struct {
		e, lo, hi float64
		regime    Regime
		want      string
	}{
		{-1.8, -2.9, -0.7, Unsettled, "band reaches -1"},
		{-0.7, -1.2, -0.2, Inelastic, "does not lie below -1"},
		{-1, -1.4, -0.6, Inelastic, "does not lie below -1"},
		{0.3, -0.2, 0.8, Upward, "is positive"},
	} {
		m := MarkupOf(OwnElasticity{Product: "black_bottle", E: test.e, Lo: test.lo, Hi: test.hi, SE: 0.3}, 3.1, 1.2)
		if m.Regime != test.regime {
			t.Errorf("e = %v: regime %v, want %v", test.e, m.Regime, test.regime)
		}
		if !math.IsNaN(m.Lerner.Est) || !math.IsNaN(m.MarginalCost.Est) || !math.IsNaN(m.ProfitMaxPrice.Est) {
			t.Errorf("e = %v: a margin is printed as fact", test.e)
		}
		for _, want := range []string{test.want, "black_bottle", "would not keep a price on the inelastic part", "market is drawn too narrowly", "rivals react", "habit", "instruments", "promotions"} {
			if !strings.Contains(m.Caution, want) {
				t.Errorf("e = %v: caution lacks %q: %s", test.e, want, m.Caution)
			}
		}
	}
}
