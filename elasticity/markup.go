package elasticity

import (
	"fmt"
	"math"
)

// Interval is an estimate with the two ends of its band. Ends that are not
// known are NaN.
type Interval struct {
	Est, Lo, Hi float64
}

// noInterval is an Interval with nothing known.
var noInterval = Interval{math.NaN(), math.NaN(), math.NaN()}

// Lerner returns the Lerner index implied by a constant own-price
// elasticity e under single-product profit maximisation (the inverse-
// elasticity rule):
//
//	L = (p - mc)/p = -1/e,   e < -1.
//
// For e >= -1 (inelastic or upward-sloping demand) a profit-maximising
// seller would not be at the current price, no margin follows, and Lerner
// returns NaN. Lerner(-Inf) is 0 (perfect competition).
//
// Reference: Lerner (1934), "The concept of monopoly and the measurement of
// monopoly power", Review of Economic Studies 1(3), 157-175; Tirole, The
// Theory of Industrial Organization (1988), section 1.1, ISBN
// 9780262200714.
func Lerner(e float64) float64 {
	if !(e < -1) {
		return math.NaN()
	}
	return -1 / e
}

// ImpliedMarginalCost returns the marginal cost at which price p is
// profit-maximising for a constant own-price elasticity e:
//
//	mc = p (1 + 1/e),   e < -1, p > 0.
//
// It returns NaN when e >= -1 or p is not positive. See Lerner.
func ImpliedMarginalCost(p, e float64) float64 {
	if !(e < -1) || !(p > 0) {
		return math.NaN()
	}
	return p * (1 + 1/e)
}

// ProfitMaxPrice returns the profit-maximising price for a constant
// own-price elasticity e and a constant unit (marginal) cost c:
//
//	p* = c e/(1 + e) = c/(1 + 1/e),   e < -1, c > 0,
//
// so p* = 2c at e = -2 and p* = 1.5c at e = -3. It returns NaN when
// e >= -1 (no finite profit-maximising price) or c is not positive.
// ProfitMaxPrice(c, -Inf) is c.
func ProfitMaxPrice(c, e float64) float64 {
	if !(e < -1) || !(c > 0) {
		return math.NaN()
	}
	return c / (1 + 1/e)
}

// LernerSE returns the delta-method standard error of the Lerner index
// from the standard error se of the elasticity e:
//
//	se(L) = |dL/de| se = se/e².
func LernerSE(e, se float64) float64 { return se / (e * e) }

// MarginalCostSE returns the delta-method standard error of the implied
// marginal cost: se(mc) = |dmc/de| se = p se/e².
func MarginalCostSE(p, e, se float64) float64 { return p * se / (e * e) }

// ProfitMaxPriceSE returns the delta-method standard error of the
// profit-maximising price: se(p*) = |dp*/de| se = c se/(1+e)².
func ProfitMaxPriceSE(c, e, se float64) float64 { return c * se / ((1 + e) * (1 + e)) }

// Regime classifies an own-price elasticity and its band for the purpose
// of reading margins off it.
type Regime int

const (
	// Elastic: the estimate and its whole band lie below -1; margins are
	// shown with bands.
	Elastic Regime = iota
	// Unsettled: the estimate is below -1 but the band reaches -1 or
	// above, so the margin band is unbounded; no margin is shown.
	Unsettled
	// Inelastic: the estimate lies in [-1, 0]; no margin is shown.
	Inelastic
	// Upward: the estimate is positive, which demand should not be.
	Upward
)

var regimeNames = []string{"elastic", "band crosses -1", "inelastic", "positive"}

func (r Regime) String() string {
	if int(r) < len(regimeNames) {
		return regimeNames[r]
	}
	return fmt.Sprintf("Regime(%d)", int(r))
}

// Classify returns the regime of elasticity e with band [lo, hi]. A band
// end that is NaN (unknown) does not count against the estimate.
func Classify(e, lo, hi float64) Regime {
	switch {
	case e > 0:
		return Upward
	case !(e < -1):
		return Inelastic
	case hi >= -1:
		return Unsettled
	}
	return Elastic
}

// OwnElasticity is an own-price elasticity with its band, as markups need
// it.
type OwnElasticity struct {
	Product string
	// E is the estimate; Lo and Hi the ends of its band (NaN if unknown,
	// -Inf allowed for an unbounded Anderson-Rubin band).
	E, Lo, Hi float64
	// SE is the standard error, NaN when the band is not a Wald band.
	SE float64
	// Band names how the band was made ("Wald", "Anderson-Rubin",
	// "bootstrap percentile").
	Band string
}

// Markup holds the margins implied by one product's own-price elasticity
// at its price. Quantities that do not apply are NaN.
type Markup struct {
	Product  string
	Price    float64
	UnitCost float64 // NaN when not given
	// Elasticity is the estimate and its band; Band says which band.
	Elasticity   Interval
	ElasticitySE float64
	Band         string
	Regime       Regime
	// Lerner is (p - mc)/p with its band; LernerSE the delta-method
	// standard error (Wald bands only).
	Lerner   Interval
	LernerSE float64
	// MarginalCost is p(1 + 1/e) with its band.
	MarginalCost   Interval
	MarginalCostSE float64
	// ProfitMaxPrice is c e/(1+e) for the given unit cost, with its band.
	ProfitMaxPrice   Interval
	ProfitMaxPriceSE float64
	// Caution explains why no margin is shown (empty when one is).
	Caution string
}

// MarkupOf computes the inverse-elasticity margins of one product at
// price p with optional unit cost c (NaN when unknown). Bands are the
// elasticity band's ends carried through each transform, which is valid
// for any band because the transforms are monotone on e < -1:
//
//	L = -1/e increasing:          [L(lo), L(hi)]
//	mc = p(1+1/e) decreasing:     [mc(hi), mc(lo)]
//	p* = c e/(1+e) increasing:    [p*(lo), p*(hi)]
//
// Standard errors by the delta method are added when e.SE is known (a
// Wald band). When the estimate or its band does not lie wholly below -1,
// no margin is computed and Caution says why. p must be positive.
func MarkupOf(e OwnElasticity, p, c float64) Markup {
	nan := math.NaN()
	m := Markup{
		Product: e.Product, Price: p, UnitCost: c,
		Elasticity: Interval{e.E, e.Lo, e.Hi}, ElasticitySE: e.SE, Band: e.Band,
		Regime: Classify(e.E, e.Lo, e.Hi),
		Lerner: noInterval, MarginalCost: noInterval, ProfitMaxPrice: noInterval,
		LernerSE: nan, MarginalCostSE: nan, ProfitMaxPriceSE: nan,
	}
	if m.Regime != Elastic {
		m.Caution = InelasticCaution(e.Product, e.E, e.Lo, e.Hi)
		return m
	}
	m.Lerner = Interval{Lerner(e.E), Lerner(e.Lo), Lerner(e.Hi)}
	m.MarginalCost = Interval{ImpliedMarginalCost(p, e.E), ImpliedMarginalCost(p, e.Hi), ImpliedMarginalCost(p, e.Lo)}
	if c > 0 {
		m.ProfitMaxPrice = Interval{ProfitMaxPrice(c, e.E), ProfitMaxPrice(c, e.Lo), ProfitMaxPrice(c, e.Hi)}
	}
	if e.SE >= 0 {
		m.LernerSE = LernerSE(e.E, e.SE)
		m.MarginalCostSE = MarginalCostSE(p, e.E, e.SE)
		if c > 0 {
			m.ProfitMaxPriceSE = ProfitMaxPriceSE(c, e.E, e.SE)
		}
	}
	return m
}

// InelasticReasons are the usual reasons an estimated own-price elasticity
// comes out at or above -1 for a product whose seller sets its price.
var InelasticReasons = []string{
	"the market is drawn too narrowly or too broadly: a category's demand is less elastic than the demand one brand or pack faces, and a narrow slice of stores or weeks may not show how buyers switch",
	"rivals react: when competitors follow our price moves, the estimate mixes our customers' response with theirs and looks less elastic than the demand we face alone",
	"long-run effects and habit: a seller may hold prices low today to win or keep regular buyers, which a one-period margin rule ignores",
	"the instruments or the model may be wrong: weak cost shifters, a shifter that also moves demand, or missing controls pull the estimate toward zero",
	"promotions and retailer pass-through: shelf prices are set by retailers, who pass cost changes on only in part, and promotional weeks can dominate the price variation",
}

// InelasticCaution explains, for a product whose elasticity e (band lo to
// hi) does not lie wholly below -1, why no margin is printed.
func InelasticCaution(product string, e, lo, hi float64) string {
	band := ""
	if !math.IsNaN(lo) && !math.IsNaN(hi) {
		band = fmt.Sprintf(" (band %.2f to %.2f)", lo, hi)
	}
	var why string
	switch Classify(e, lo, hi) {
	case Upward:
		why = "is positive: more units sold at higher prices is not a demand response, so no margin can be read from it"
	case Unsettled:
		why = "lies below -1 but its band reaches -1 or above, so the margin could be anywhere up to the whole price; no margin is shown"
	default:
		why = "does not lie below -1: demand looks inelastic, and the inverse-elasticity rule gives no margin (it would call for a margin of 100% or more); no margin is shown"
	}
	s := fmt.Sprintf("%s: the own-price elasticity %.2f%s %s. A seller that maximises profit would not keep a price on the inelastic part of its demand, because raising the price would then lift revenue and cut costs together. Usual reasons for such an estimate:", product, e, band, why)
	for i, r := range InelasticReasons {
		s += fmt.Sprintf(" (%d) %s;", i+1, r)
	}
	return s[:len(s)-1] + "."
}
