package demand

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// EstimateInteracted fits one pooled demand model in which every product
// has its own price slope, instrumented by the shifters interacted with
// the product, while controls and fixed effects are shared:
//
//	ln q_it = Σ_k e_k · ln p_it · 1{i = k} + controls + FE + u_it
//	instruments: z_it · 1{i = k} for every shifter z and product k
//
// (ln applies to the log forms only). Beside the table it tests that all
// products share one elasticity, e_1 = … = e_P, by a Wald test of the
// Q = P-1 restrictions with the model's covariance:
//
//	W = (R ê)ᵀ (R V̂ Rᵀ)⁻¹ (R ê),   F = W/Q ~ F(Q, df)
//
// where row r of R is s_1 at e_1 and -s_{r+1} at e_{r+1}, s_k turning
// coefficient k into an elasticity (Greene, Econometric Analysis, 7th ed.,
// section 5.3.2). p is a prepared panel (see Prepare).
func EstimateInteracted(p *Panel, s *Spec, workers int) (*ProductTable, error) {
	if err := checkProductSpec(s, "--interact product"); err != nil {
		return nil, err
	}
	if _, _, _, err := productLevels(p, s.Product); err != nil {
		return nil, err
	}
	t := newProductTable("interact product", p, s)
	form := s.Form
	if form == "" {
		form = "log-log"
	}
	t.Form = form

	// Leave out rows with a missing value, counted under the first used
	// column (in model order) that is missing.
	pcodes, _, _ := p.IDs(s.Product)
	used := append([]string{s.Quantity, s.Price}, s.Controls...)
	used = append(used, s.Shifters...)
	cols := make([][]float64, len(used))
	for j, c := range used {
		x, err := p.Float(c)
		if err != nil {
			return nil, err
		}
		cols[j] = x
	}
	keep := make([]bool, p.N)
	miss := make([]int, len(used)+1)
	for i := range keep {
		if pcodes[i] < 0 {
			miss[0]++
			continue
		}
		keep[i] = true
		for j, x := range cols {
			if math.IsNaN(x[i]) {
				keep[i] = false
				miss[j+1]++
				break
			}
		}
	}
	for j, n := range miss {
		if n == 0 {
			continue
		}
		name := s.Product
		if j > 0 {
			name = used[j-1]
		}
		t.Dropped = append(t.Dropped, Drop{Reason: "missing value", Column: name, Rows: n})
	}
	sub := p.Subset(keep)
	if sub.N == 0 {
		return nil, fmt.Errorf("%w: every row of %s has a missing value in a used column", ErrEmpty, p.Source)
	}
	codes, levels, prods, err := productLevels(sub, s.Product)
	if err != nil {
		return nil, err
	}
	if len(prods) < 2 {
		return nil, fmt.Errorf("%w: --interact product needs at least two products; column %q has only %q in the rows used: fit the pooled model instead", ErrSpec, s.Product, levels[prods[0]])
	}
	slot := make([]int, len(levels)) // level → position among products, -1 if absent
	for l := range slot {
		slot[l] = -1
	}
	for k, l := range prods {
		slot[l] = k
	}

	// Transform quantity and price.
	all := make([]bool, sub.N)
	for i := range all {
		all[i] = true
	}
	y, x := sub.Num[s.Quantity], sub.Num[s.Price]
	yName, xName := s.Quantity, s.Price
	if form == "log-log" || form == "semi-log" {
		if y, err = logColumn(sub, s.Quantity, y, all, "quantity"); err != nil {
			return nil, err
		}
		yName = "ln " + s.Quantity
	}
	if form == "log-log" {
		if x, err = logColumn(sub, s.Price, x, all, "price"); err != nil {
			return nil, err
		}
		xName = "ln " + s.Price
	}

	// Interaction columns, product-major: product k's price term, then
	// its shifter terms.
	aug := sub
	yName = uniqueName(aug, yName)
	aug.AddNum(yName, y)
	spec := Spec{
		Data: s.Data, Unit: s.Unit, Time: s.Time,
		Outcome: yName, Exogenous: s.Controls,
		FE: s.FE, Cluster: s.Cluster, Vcov: s.Vcov, Estimator: s.Estimator, Level: s.Level,
		MaxSweeps: s.MaxSweeps, Tolerance: s.Tolerance,
	}
	interact := func(base string, v []float64, l int) string {
		name := uniqueName(aug, base+" × "+levels[l])
		c := make([]float64, sub.N)
		for i, code := range codes {
			if int(code) == l {
				c[i] = v[i]
			}
		}
		aug.AddNum(name, c)
		return name
	}
	for _, l := range prods {
		spec.Endogenous = append(spec.Endogenous, interact(xName, x, l))
	}
	for _, l := range prods {
		for _, z := range s.Shifters {
			spec.Instruments = append(spec.Instruments, interact(z, sub.Num[z], l))
		}
	}
	d, err := Build(aug, &spec, workers)
	if err != nil {
		return nil, fmt.Errorf("--interact product: %w", err)
	}
	for _, dr := range d.Dropped {
		addDrop(&t.Dropped, dr)
	}
	est, vk, err := d.Defaults()
	if err != nil {
		return nil, err
	}
	fit, err := ivcore.Estimate(d.Moments, d.Model, est, vk)
	if err != nil {
		return nil, fmt.Errorf("--interact product: %w", err)
	}
	t.N = d.N
	t.Estimator, t.Vcov, t.VcovDetail = fit.Estimator.String(), fit.Vcov.Kind.String(), fit.Vcov.Label

	// Means by product over the rows used, for the non-log forms.
	nP := len(prods)
	count := make([]int, nP)
	sumP := make([]float64, nP)
	sumQ := make([]float64, nP)
	minP, maxP := make([]float64, nP), make([]float64, nP)
	for k := range minP {
		minP[k], maxP[k] = math.Inf(1), math.Inf(-1)
	}
	rawP, rawQ := sub.Num[s.Price], sub.Num[s.Quantity]
	for _, i := range d.Rows {
		k := slot[codes[i]]
		count[k]++
		sumP[k] += rawP[i]
		sumQ[k] += rawQ[i]
		minP[k] = math.Min(minP[k], rawP[i])
		maxP[k] = math.Max(maxP[k], rawP[i])
	}
	crit := ivcore.Critical(d.Level, fit.Vcov.DF)
	nz := len(s.Shifters)
	idx := make([]int, nP)
	scales := make([]float64, nP)
	for k, l := range prods {
		j := fit.Index(spec.Endogenous[k])
		idx[k] = j
		row := ProductElasticity{Product: levels[l], N: count[k], Band: "wald", Level: d.Level, At: "everywhere (constant elasticity)"}
		if count[k] == 0 {
			row.Failed = true
			row.Warnings = []string{"not estimated: no rows of this product are left after fixed-effect singletons were dropped"}
			t.Elasticities = append(t.Elasticities, row)
			t.Fits = append(t.Fits, nil)
			continue
		}
		mp, mq := sumP[k]/float64(count[k]), sumQ[k]/float64(count[k])
		row.PriceStats = PriceStats{MeanPrice: mp, MeanQuantity: mq, PriceMin: minP[k], PriceMax: maxP[k]}
		sc := elasticityScale(form, mp, mq)
		scales[k] = sc
		switch form {
		case "semi-log":
			row.At = fmt.Sprintf("product mean price %.4g", mp)
		case "linear":
			row.At = fmt.Sprintf("product means (price %.4g, quantity %.4g)", mp, mq)
		}
		row.OwnPrice = sc * fit.Coef[j]
		row.StdError = math.Abs(sc) * fit.SE(j)
		row.CILow, row.CIHigh = row.OwnPrice-crit*row.StdError, row.OwnPrice+crit*row.StdError
		if len(fit.Vcov.Clusters) > 0 {
			row.Clusters = minInt(fit.Vcov.Clusters)
		}
		var first *ivcore.Fit
		var signs []signCheck
		var fs []ivcore.FirstStage
		if est != ivcore.OLS && nz > 0 {
			f, err := ownFirstStage(d, k, nz, vk)
			if err != nil {
				return nil, fmt.Errorf("--interact product: first stage of %s: %w", spec.Endogenous[k], err)
			}
			fs = []ivcore.FirstStage{f}
			first = f.Fit
			row.FirstStageF = f.F.F
			for a, pos := range f.Excluded {
				signs = append(signs, signCheck{pos: pos, name: s.Shifters[a]})
			}
		}
		row.Warnings = productWarnings(row, first, signs)
		t.Elasticities = append(t.Elasticities, row)
		t.Fits = append(t.Fits, &ProductFit{Product: levels[l], Design: d, Fit: fit, FirstStage: fs, Index: j, Scale: sc})
	}

	// All products share one elasticity.
	var rIdx []int
	for k := range prods {
		if count[k] > 0 {
			rIdx = append(rIdx, k)
		}
	}
	if len(rIdx) >= 2 {
		r := mat.NewDense(len(rIdx)-1, len(fit.Coef), nil)
		for a, k := range rIdx[1:] {
			r.Set(a, idx[rIdx[0]], scales[rIdx[0]])
			r.Set(a, idx[k], -scales[k])
		}
		w, err := ivcore.Wald(fit.Coef, fit.Cov, r, nil, fit.Vcov.DF)
		if err != nil {
			t.Notes = append(t.Notes, "the test of one shared elasticity could not be computed: "+err.Error())
		} else {
			t.Equal = &EqualityTest{Chi2: w.Chi2, F: w.F, Q: w.Q, DF: w.DF, P: w.P}
		}
	}
	if !feMentions(s.FE, s.Product) {
		t.Notes = append(t.Notes, fmt.Sprintf("no fixed effect involves %q, so the products share one demand level: add %q (or %q*store) to --fe unless their levels are meant to be equal", s.Product, s.Product, s.Product))
	}
	t.Notes = append(t.Notes, "first-stage F per product tests that product's own shifter terms in the first stage of its price term")
	return t, nil
}

// ownFirstStage fits the first stage of product k's price term on all
// instruments and tests the product's own shifter terms (nz of them,
// stored product-major) with the model's kind of covariance:
//
//	x_k = Z π + v,   F_k = π̂_kᵀ V̂(π̂_k)⁻¹ π̂_k / nz
//
// The other products' shifter terms are kept in the regression but not
// tested: with product-specific fixed effects they are zero on product
// k's rows, and a joint test of them would be degenerate.
func ownFirstStage(d *Design, k, nz int, vk ivcore.VcovKind) (ivcore.FirstStage, error) {
	md := d.Model
	e := md.Endog[k]
	fit, err := ivcore.Estimate(d.Moments, ivcore.Model{Y: e, Exog: md.Z()}, ivcore.OLS, vk)
	if err != nil {
		return ivcore.FirstStage{}, err
	}
	fs := ivcore.FirstStage{Endogenous: d.Names[e], Fit: fit}
	for a := 0; a < nz; a++ {
		fs.Excluded = append(fs.Excluded, len(md.Exog)+k*nz+a)
	}
	fs.F, err = ivcore.Wald(fit.Coef, fit.Cov, ivcore.Select(fs.Excluded, len(fit.Coef)), nil, fit.Vcov.DF)
	if err != nil {
		return ivcore.FirstStage{}, err
	}
	return fs, nil
}

// feMentions reports whether any fixed effect (or interaction a*b) uses
// the column.
func feMentions(fe []string, col string) bool {
	for _, f := range fe {
		for _, part := range strings.Split(f, "*") {
			if strings.TrimSpace(part) == col {
				return true
			}
		}
	}
	return false
}

// uniqueName returns name, or name with a prime appended until no column
// of p carries it.
func uniqueName(p *Panel, name string) string {
	for p.Has(name) {
		name += "'"
	}
	return name
}
