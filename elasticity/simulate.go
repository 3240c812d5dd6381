package elasticity

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"priceiv/ivcore"
)

// ConstantElasticityNote states the assumption behind every what-if.
const ConstantElasticityNote = "Predictions assume constant elasticities: every 1% price step moves units by the same percentage wherever it starts, q' = q·Π_j (p'_j/p_j)^e_ij, with everything else (rivals' prices, promotions, season, distribution) held as it was. They are most trustworthy for moderate moves inside the range of prices the data have seen."

// Estimates are the own- and cross-price elasticities of a product line
// with their uncertainty.
type Estimates struct {
	// Products names the products; the order indexes everything else.
	Products []string
	// E holds the elasticities: E.At(i, j) is the elasticity of product
	// i's quantity with respect to product j's price.
	E *mat.Dense
	// Cross reports whether cross-price elasticities were estimated. When
	// false the off-diagonal of E is zero by assumption and carries no
	// uncertainty.
	Cross bool
	// Pooled reports that one elasticity, estimated for all products
	// together, stands for each product's own elasticity.
	Pooled bool
	// SE holds the standard errors of E (nil when unknown).
	SE *mat.Dense
	// Cov is the covariance of vec(E) in row-major order, n²×n² (nil
	// when unknown; SE is then used with the elements taken as
	// uncorrelated).
	Cov *mat.SymDense
	// Draws holds elasticity matrices drawn from the estimate's
	// uncertainty (bootstrap replicates), each n×n in row-major order.
	Draws [][]float64
	// OwnLo and OwnHi are the ends of the own-elasticity bands as
	// estimated (NaN when unknown), and OwnBand names their kind.
	OwnLo, OwnHi []float64
	OwnBand      string
	// Level is the band level (0 means 0.95) and DF the degrees of
	// freedom of the t reference for delta-method bands (0: normal).
	// Crit, when positive, is the critical value to use instead (the one
	// the estimate's own Wald bands were built with).
	Level float64
	DF    int
	Crit  float64
	// Notes are remarks on how the estimates were read.
	Notes []string
}

// crit returns the critical value of delta-method bands.
func (est *Estimates) crit() float64 {
	if est.Crit > 0 {
		return est.Crit
	}
	return ivcore.Critical(est.level(), est.DF)
}

func (est *Estimates) level() float64 {
	if est.Level > 0 && est.Level < 1 {
		return est.Level
	}
	return 0.95
}

// Own returns product j's own-price elasticity with its band: bootstrap
// percentiles when draws are present, the estimated band otherwise.
func (est *Estimates) Own(j int) OwnElasticity {
	n := len(est.Products)
	o := OwnElasticity{Product: est.Products[j], E: est.E.At(j, j), Lo: math.NaN(), Hi: math.NaN(), SE: math.NaN(), Band: est.OwnBand}
	if est.SE != nil {
		o.SE = est.SE.At(j, j)
	}
	if j < len(est.OwnLo) {
		o.Lo, o.Hi = est.OwnLo[j], est.OwnHi[j]
	}
	if len(est.Draws) >= ivcore.MinBootstrapReplicates {
		x := make([]float64, len(est.Draws))
		for r, d := range est.Draws {
			x[r] = d[j*n+j]
		}
		o.Lo, o.Hi = percentiles(x, est.level())
		o.Band = fmt.Sprintf("bootstrap percentile, %d draws", len(est.Draws))
		o.SE = math.NaN()
	}
	return o
}

// Baseline is the current position of each product, indexed like
// Estimates.Products. Unknown entries are NaN.
type Baseline struct {
	// Price is the current price, > 0.
	Price []float64
	// Quantity is the units per period at the current price. Without it
	// only percentage changes are given.
	Quantity []float64
	// UnitCost is the cost of one more unit. Without it no contribution
	// is given.
	UnitCost []float64
	// PriceMin and PriceMax are the lowest and highest prices observed in
	// the data, for the extrapolation warning.
	PriceMin, PriceMax []float64
}

// ChangeKind says how a price change is stated.
type ChangeKind int

const (
	// Percent is a relative change, "+5%".
	Percent ChangeKind = iota
	// NewPrice is an absolute new price, "4.20".
	NewPrice
)

// Change is one price move of a what-if.
type Change struct {
	Product string
	Index   int
	Kind    ChangeKind
	// Value is the percentage (Percent) or the new price (NewPrice).
	Value float64
	// Text is the change as the user wrote it.
	Text string
}

// Apply returns the new price for current price p.
func (c Change) Apply(p float64) float64 {
	if c.Kind == Percent {
		return p * (1 + c.Value/100)
	}
	return c.Value
}

const changeForms = "PRODUCT=+5% (raise by 5 percent), PRODUCT=-3% (cut by 3 percent) or PRODUCT=4.20 (a new price)"

// ParseChange reads a price change written as PRODUCT=+5%, PRODUCT=-3% or
// PRODUCT=4.20 (a new absolute price) for one of products. The product is
// everything before the last '='. Errors say which part is wrong and list
// the expected forms, or the known products for an unknown product.
func ParseChange(s string, products []string) (Change, error) {
	eq := strings.LastIndexByte(s, '=')
	if eq < 0 {
		return Change{}, fmt.Errorf("price change %q has no '=': write %s", s, changeForms)
	}
	name, val := strings.TrimSpace(s[:eq]), strings.TrimSpace(s[eq+1:])
	if name == "" {
		return Change{}, fmt.Errorf("price change %q names no product: write %s", s, changeForms)
	}
	idx := -1
	for j, p := range products {
		if p == name {
			idx = j
		}
	}
	if idx < 0 {
		hint := ""
		for _, p := range products {
			if strings.EqualFold(p, name) {
				hint = fmt.Sprintf(" (did you mean %q? names are case-sensitive)", p)
			}
		}
		return Change{}, fmt.Errorf("unknown product %q in price change %q%s; the products are %s", name, s, hint, quoteList(products))
	}
	c := Change{Product: name, Index: idx, Text: s}
	if v, ok := strings.CutSuffix(val, "%"); ok {
		x, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return Change{}, fmt.Errorf("price change %q: cannot read %q as a percentage; write %s", s, val, changeForms)
		}
		if x <= -100 {
			return Change{}, fmt.Errorf("price change %q: a cut of 100%% or more leaves no price; a cut must be above -100%%", s)
		}
		c.Kind, c.Value = Percent, x
		return c, nil
	}
	if strings.HasPrefix(val, "+") || strings.HasPrefix(val, "-") {
		return Change{}, fmt.Errorf("price change %q: a signed number without %% is ambiguous; write %s%% for a percentage change, or the new price itself without a sign", s, val)
	}
	x, err := strconv.ParseFloat(val, 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return Change{}, fmt.Errorf("price change %q: cannot read %q as a new price; write %s", s, val, changeForms)
	}
	if x <= 0 {
		return Change{}, fmt.Errorf("price change %q: a new price must be positive", s)
	}
	c.Kind, c.Value = NewPrice, x
	return c, nil
}

// SimRow is the predicted effect of a what-if on one product, per period.
// Money and unit figures are NaN when the baseline quantity is unknown;
// contribution figures are NaN without a unit cost.
type SimRow struct {
	Product string
	// Price and NewPrice are the current and the simulated price;
	// PriceChangePct is 100(NewPrice/Price - 1).
	Price, NewPrice, PriceChangePct float64
	// Changed is true for products whose price moves.
	Changed  bool
	Units    float64
	UnitCost float64
	// NewUnits are the predicted units; UnitsChange and UnitsPct the
	// change in units and in percent.
	NewUnits, UnitsChange, UnitsPct Interval
	// RevenueChange and RevenuePct are the change in p·q.
	RevenueChange, RevenuePct Interval
	// ContributionChange and ContributionPct are the change in (p - c)·q.
	ContributionChange, ContributionPct Interval
	// Extrapolated is true when the new price lies outside the observed
	// price range.
	Extrapolated bool
}

// SimTotal is the effect on the whole line.
type SimTotal struct {
	UnitsChange, UnitsPct               Interval
	RevenueChange, RevenuePct           Interval
	ContributionChange, ContributionPct Interval
}

// Simulation is the outcome of a what-if.
type Simulation struct {
	Changes []Change
	Rows    []SimRow
	Total   SimTotal
	// Level is the band level and Band says how the bands were made.
	Level float64
	Band  string
	// Warnings flag extrapolation and missing inputs; Assumption states
	// the constant-elasticity assumption.
	Warnings   []string
	Notes      []string
	Assumption string
}

// functional is a + Σ_i b_i f_i, where f_i = q'_i/q_i is product i's
// predicted units ratio.
type functional struct {
	a float64
	b []float64
}

func (fn functional) value(f []float64) float64 {
	v := fn.a
	for i, bi := range fn.b {
		if bi != 0 {
			v += bi * f[i]
		}
	}
	return v
}

// ratios returns f_i = exp(Σ_j e_ij ln r_j) for the elasticities e
// (row-major n×n, or E when nil).
func ratios(E *mat.Dense, e []float64, lr []float64, f []float64) {
	n := len(lr)
	for i := range n {
		s := 0.0
		for j, l := range lr {
			if l == 0 {
				continue
			}
			if e != nil {
				s += e[i*n+j] * l
			} else {
				s += E.At(i, j) * l
			}
		}
		f[i] = math.Exp(s)
	}
}

// MaxMoveFactor bounds a simulated price move: the new price must lie
// within this factor of the current one (above and below). Moves beyond it
// are refused rather than extrapolated.
const MaxMoveFactor = 3

// Simulate predicts the effect of the price changes on every product of
// the line under constant elasticities:
//
//	q'_i = q_i Π_j (p'_j/p_j)^{e_ij}
//	Δunits_i = q'_i - q_i,   Δrevenue_i = p'_i q'_i - p_i q_i,
//	Δcontribution_i = (p'_i - c_i) q'_i - (p_i - c_i) q_i,
//
// per product and summed over the line, with percentages against the
// current values. Bands come from the elasticity draws when est has at
// least ivcore.MinBootstrapReplicates of them (the level's percentiles of
// each quantity over the draws), and otherwise from the delta method with
// the gradient ∂X/∂e_ij = (∂X/∂q'_i) q'_i ln(p'_j/p_j) and the covariance
// of the elasticities (Cov, or SE² with the elements taken as
// uncorrelated), as X ± t·se with t from Student's t with est.DF degrees
// of freedom (or est.Crit when set). The delta method is linear in the
// elasticities, so its bands are symmetric; bootstrap bands need not be.
//
// Simulate returns an error for no changes, a product changed twice, or a
// missing or non-positive current price, or a move beyond MaxMoveFactor;
// it warns when a new price lies
// outside the observed range. It panics if the lengths of base differ
// from the number of products.
func Simulate(est *Estimates, base Baseline, changes []Change) (*Simulation, error) {
	n := len(est.Products)
	if r, c := est.E.Dims(); r != n || c != n {
		panic("elasticity: elasticity matrix is not products × products")
	}
	if len(base.Price) != n {
		panic("elasticity: baseline prices differ in number from the products")
	}
	get := func(x []float64, j int) float64 {
		if x == nil {
			return math.NaN()
		}
		if len(x) != n {
			panic("elasticity: a baseline slice differs in length from the products")
		}
		return x[j]
	}
	if len(changes) == 0 {
		return nil, errors.New("no price change to simulate: give at least one, for example " + changeForms)
	}
	newP := make([]float64, n)
	copy(newP, base.Price)
	by := map[int]Change{}
	for _, c := range changes {
		if c.Index < 0 || c.Index >= n || est.Products[c.Index] != c.Product {
			panic("elasticity: change does not belong to these products; use ParseChange")
		}
		if prev, dup := by[c.Index]; dup {
			return nil, fmt.Errorf("product %q is changed twice (%q and %q); give one change per product", c.Product, prev.Text, c.Text)
		}
		by[c.Index] = c
	}
	for j := range n {
		if p := base.Price[j]; !(p > 0) || math.IsInf(p, 0) {
			return nil, fmt.Errorf("product %q has no usable current price (%v): give prices with --prices FILE (columns product, price, unit_cost)", est.Products[j], p)
		}
	}
	sim := &Simulation{Changes: changes, Level: est.level(), Assumption: ConstantElasticityNote}
	lr := make([]float64, n)
	for j, c := range by {
		newP[j] = c.Apply(base.Price[j])
		if ratio := newP[j] / base.Price[j]; !(ratio >= 1.0/MaxMoveFactor && ratio <= MaxMoveFactor) {
			return nil, fmt.Errorf("%q moves the price of %q from %.4g to %.4g (%.3g times): a constant elasticity cannot be carried that far from the prices in the data; give a move within a factor %g of the current price", c.Text, c.Product, base.Price[j], newP[j], ratio, float64(MaxMoveFactor))
		}
		lr[j] = math.Log(newP[j] / base.Price[j])
	}

	// The quantities of interest as functionals of f.
	type out struct {
		fn functional
		ok bool
		to *Interval
	}
	var outs []out
	add := func(to *Interval, ok bool, a float64, b []float64) {
		*to = noInterval
		outs = append(outs, out{functional{a, b}, ok, to})
	}
	unit := func(i int, v float64) []float64 {
		b := make([]float64, n)
		b[i] = v
		return b
	}
	sim.Rows = make([]SimRow, n)
	haveQ, haveC := true, true
	totR, totC, totQ := 0.0, 0.0, 0.0
	var unknownRange []string
	bTotQ, bTotR, bTotC := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range n {
		p, pn := base.Price[i], newP[i]
		q, c := get(base.Quantity, i), get(base.UnitCost, i)
		row := &sim.Rows[i]
		*row = SimRow{Product: est.Products[i], Price: p, NewPrice: pn, PriceChangePct: 100 * (pn/p - 1), Units: q, UnitCost: c}
		_, row.Changed = by[i]
		qok := q > 0 && !math.IsInf(q, 0)
		cok := c > 0 && !math.IsInf(c, 0)
		haveQ = haveQ && qok
		haveC = haveC && cok
		add(&row.NewUnits, qok, 0, unit(i, q))
		add(&row.UnitsChange, qok, -q, unit(i, q))
		add(&row.UnitsPct, true, -100, unit(i, 100))
		add(&row.RevenueChange, qok, -p*q, unit(i, pn*q))
		add(&row.RevenuePct, true, -100, unit(i, 100*pn/p))
		add(&row.ContributionChange, qok && cok, -(p-c)*q, unit(i, (pn-c)*q))
		add(&row.ContributionPct, cok && p > c, -100, unit(i, 100*(pn-c)/(p-c)))
		if qok {
			totQ += q
			totR += p * q
			bTotQ[i], bTotR[i] = q, pn*q
			if cok {
				totC += (p - c) * q
				bTotC[i] = (pn - c) * q
			}
		}
		lo, hi := get(base.PriceMin, i), get(base.PriceMax, i)
		if row.Changed {
			switch {
			case pn < lo:
				row.Extrapolated = true
				sim.Warnings = append(sim.Warnings, fmt.Sprintf("%s: the new price %s is below the lowest price in the data (%s); the prediction extrapolates the constant-elasticity curve beyond what was observed", row.Product, money(pn), money(lo)))
			case pn > hi:
				row.Extrapolated = true
				sim.Warnings = append(sim.Warnings, fmt.Sprintf("%s: the new price %s is above the highest price in the data (%s); the prediction extrapolates the constant-elasticity curve beyond what was observed", row.Product, money(pn), money(hi)))
			case math.IsNaN(lo) || math.IsNaN(hi):
				unknownRange = append(unknownRange, row.Product)
			}
		}
	}
	if len(unknownRange) > 0 {
		sim.Notes = append(sim.Notes, fmt.Sprintf("the range of prices observed in the data is not known for %s, so whether the new prices extrapolate beyond it cannot be checked", strings.Join(unknownRange, ", ")))
	}
	t := &sim.Total
	add(&t.UnitsChange, haveQ, -totQ, bTotQ)
	add(&t.UnitsPct, haveQ, -100, scaled(bTotQ, 100/totQ))
	add(&t.RevenueChange, haveQ, -totR, bTotR)
	add(&t.RevenuePct, haveQ, -100, scaled(bTotR, 100/totR))
	add(&t.ContributionChange, haveQ && haveC, -totC, bTotC)
	add(&t.ContributionPct, haveQ && haveC && totC > 0, -100, scaled(bTotC, 100/totC))
	if !haveQ {
		sim.Notes = append(sim.Notes, "units per period are not known for every product, so changes are given in percent only (add a quantity column to the prices file for units and money)")
	}
	if !haveC {
		sim.Notes = append(sim.Notes, "unit costs are not known for every product, so contribution is left out where the cost is missing (add a unit_cost column to the prices file)")
	}
	sim.Notes = append(sim.Notes, est.Notes...)
	if !est.Cross && n > 1 && !est.Pooled {
		sim.Notes = append(sim.Notes, "cross-price elasticities were not estimated: each product's units respond to its own price only, and a move in one price leaves its siblings' sales where they were")
	}

	// Point values.
	f := make([]float64, n)
	ratios(est.E, nil, lr, f)
	for _, o := range outs {
		if o.ok {
			o.to.Est = o.fn.value(f)
		}
	}

	// Bands.
	level := est.level()
	switch {
	case len(est.Draws) >= ivcore.MinBootstrapReplicates:
		sim.Band = fmt.Sprintf("percentiles of %d bootstrap draws", len(est.Draws))
		vals := make([][]float64, len(outs))
		fd := make([]float64, n)
		for _, d := range est.Draws {
			if len(d) != n*n {
				panic("elasticity: an elasticity draw is not products × products")
			}
			ratios(nil, d, lr, fd)
			for k, o := range outs {
				if o.ok {
					vals[k] = append(vals[k], o.fn.value(fd))
				}
			}
		}
		for k, o := range outs {
			if o.ok {
				o.to.Lo, o.to.Hi = percentiles(vals[k], level)
			}
		}
	case est.Cov != nil || est.SE != nil:
		crit := est.crit()
		sim.Band = "delta method"
		if est.Cov == nil {
			sim.Band += ", elasticities taken as uncorrelated"
		}
		g := make([]float64, n*n)
		for _, o := range outs {
			if !o.ok {
				continue
			}
			for i := range n {
				for j := range n {
					g[i*n+j] = o.fn.b[i] * f[i] * lr[j]
				}
			}
			se := math.Sqrt(est.quadForm(g))
			o.to.Lo, o.to.Hi = o.to.Est-crit*se, o.to.Est+crit*se
		}
	default:
		sim.Band = "none (no standard errors or draws were given)"
	}
	return sim, nil
}

// quadForm returns gᵀ V g for the covariance V of vec(E).
func (est *Estimates) quadForm(g []float64) float64 {
	n := len(est.Products)
	if est.Cov != nil {
		v := mat.NewVecDense(len(g), g)
		return math.Max(mat.Inner(v, est.Cov, v), 0)
	}
	s := 0.0
	for i := range n {
		for j := range n {
			if !est.Cross && i != j {
				continue
			}
			se := est.SE.At(i, j)
			if math.IsNaN(se) {
				continue
			}
			s += g[i*n+j] * g[i*n+j] * se * se
		}
	}
	return s
}

func scaled(b []float64, c float64) []float64 {
	out := make([]float64, len(b))
	for i, v := range b {
		out[i] = v * c
	}
	return out
}

// percentiles returns the (1-level)/2 and (1+level)/2 empirical quantiles
// of x (sorted in place).
func percentiles(x []float64, level float64) (lo, hi float64) {
	if len(x) == 0 {
		return math.NaN(), math.NaN()
	}
	sort.Float64s(x)
	return stat.Quantile((1-level)/2, stat.Empirical, x, nil), stat.Quantile((1+level)/2, stat.Empirical, x, nil)
}

// money formats a price.
func money(x float64) string {
	if math.IsNaN(x) {
		return "?"
	}
	return strconv.FormatFloat(x, 'f', 2, 64)
}
