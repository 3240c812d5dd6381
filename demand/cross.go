package demand

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"priceiv/ivcore"
)

// ErrNoSharedKeys: the products of a cross-price model are never priced in
// the same market and period.
var ErrNoSharedKeys = errors.New("products do not share market-period keys")

// Matched counts how the products' rows line up on the market-period keys
// (--unit × --time) of a cross-price model.
type Matched struct {
	// Keys is the number of distinct keys where at least one product has
	// a price.
	Keys int `json:"keys"`
	// Complete is the number of keys where every product has a price;
	// only these rows enter the model.
	Complete int `json:"complete"`
	// Pairs[i][j] is the number of keys where products i and j both have
	// a price; Pairs[i][i] counts the keys of product i.
	Pairs [][]int `json:"pairs"`
}

// CrossPrice is the own- and cross-price elasticity matrix of a product
// line: Matrix[i][j] is the elasticity of product i's units with respect
// to product j's price, the diagonal the own elasticities.
type CrossPrice struct {
	Products []string `json:"products"`
	// Matrix, StdErrors and the Wald band CILow..CIHigh (at Level) are
	// indexed [quantity i][price j].
	Matrix    [][]float64 `json:"matrix"`
	StdErrors [][]float64 `json:"std_errors"`
	CILow     [][]float64 `json:"ci_low"`
	CIHigh    [][]float64 `json:"ci_high"`
	// N[i] is the number of rows of product i's equation.
	N []int `json:"n"`
	// FirstStageF[i][j] is the first-stage F of product j's price in
	// product i's equation (all excluded instruments).
	FirstStageF [][]float64 `json:"first_stage_f"`
	// Band names the method of the band ("wald").
	Band       string  `json:"band"`
	Level      float64 `json:"level"`
	Form       string  `json:"form"`
	Estimator  string  `json:"estimator"`
	Vcov       string  `json:"vcov"`
	VcovDetail string  `json:"vcov_detail,omitempty"`
	// Unit and Time are the key columns that match products.
	Unit    string  `json:"unit"`
	Time    string  `json:"time"`
	Matched Matched `json:"matched"`
	// Specific lists the shifters that differ across products within a
	// key (each enters once per product); Common those that do not
	// (each enters once).
	Specific    []string `json:"product_specific_shifters"`
	Common      []string `json:"common_shifters"`
	Instruments int      `json:"instruments"`
	Controls    []string `json:"controls"`
	FE          []string `json:"fixed_effects"`
	Warnings    []string `json:"warnings"`
	// Bootstrap holds cluster-bootstrap percentile bands of the matrix
	// (nil unless asked for), and BootstrapDraws the joint replicate
	// draws [replicate][quantity i][price j].
	Bootstrap      *CrossBootstrap `json:"bootstrap,omitempty"`
	BootstrapDraws [][][]float64   `json:"bootstrap_draws,omitempty"`
	// Fits holds each product's equation, in product order.
	Fits []*ProductFit `json:"-"`
}

// CrossBootstrap is the percentile band of every entry of a cross-price
// matrix from a joint cluster bootstrap of all equations.
type CrossBootstrap struct {
	CILow      [][]float64 `json:"ci_low"`
	CIHigh     [][]float64 `json:"ci_high"`
	StdErrors  [][]float64 `json:"std_errors"`
	Replicates int         `json:"replicates"`
	Clusters   int         `json:"clusters"`
	Seed       uint64      `json:"seed"`
	Level      float64     `json:"level"`
}

// CrossOrderError reports a cross-price model with fewer instruments than
// prices.
type CrossOrderError struct {
	Products []string
	Specific []string
	Common   []string
}

func (e *CrossOrderError) Error() string {
	p := len(e.Products)
	l := len(e.Specific)*p + len(e.Common)
	var parts []string
	for _, z := range e.Specific {
		parts = append(parts, fmt.Sprintf("%s (product-specific: %d)", z, p))
	}
	for _, z := range e.Common {
		parts = append(parts, fmt.Sprintf("%s (common: 1)", z))
	}
	if len(parts) == 0 {
		parts = []string{"none"}
	}
	return fmt.Sprintf("the cross-price model has %d prices to instrument (one per product: %s) but only %d instrument(s): %s. "+
		"A shifter that differs across products in the same market and period (such as each product's own ingredient cost) counts once per product; "+
		"one that is the same for every product there (such as a national bean index) counts once. "+
		"Add product-specific cost shifters, or estimate own-price elasticities only (--by product)",
		p, strings.Join(e.Products, ", "), l, strings.Join(parts, ", "))
}

func (e *CrossOrderError) Unwrap() error { return ivcore.ErrOrderCondition }

// NoSharedKeysError reports products whose rows do not line up on the
// market-period keys.
type NoSharedKeysError struct {
	Unit, Time string
	Products   []string
	Matched    Matched
	// Need is the fewest complete keys the model can use.
	Need int
}

func (e *NoSharedKeysError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "the cross-price model matches products by %s × %s, but only %d of the %d keys hold a price for all %d products (at least %d needed)",
		e.Unit, e.Time, e.Matched.Complete, e.Matched.Keys, len(e.Products), e.Need)
	var pairs []string
	for i := range e.Products {
		for j := i + 1; j < len(e.Products); j++ {
			pairs = append(pairs, fmt.Sprintf("%s & %s: %d", e.Products[i], e.Products[j], e.Matched.Pairs[i][j]))
		}
	}
	fmt.Fprintf(&b, "; keys matched by pair: %s", strings.Join(pairs, "; "))
	b.WriteString(". Check that --unit and --time name the same markets and periods for every product (same spelling, same week numbering), or leave out products rarely sold alongside the others (--where)")
	return b.String()
}

func (e *NoSharedKeysError) Unwrap() error { return ErrNoSharedKeys }

// EstimateCross estimates the own- and cross-price elasticities of a
// product line. The panel is matched on the market-period keys (Unit ×
// Time): for every product i, on the keys where all products have a price,
//
//	ln q_i = Σ_j e_ij ln p_j + controls_i + FE + u_i
//
// instrumented by the shifters: one that differs across products within a
// key (a product-specific cost, such as an ingredient index) enters once
// per product, z_j, and one that is the same for every product there
// enters once. The order condition needs at least as many instruments as
// prices, P·|specific| + |common| >= P; EstimateCross refuses otherwise
// (CrossOrderError), and when fewer keys hold all products than the
// equations have parameters (NoSharedKeysError). For the semi-log and
// linear forms e_ij = b_ij p̄_j and e_ij = b_ij p̄_j / q̄_i at the means of
// the rows used (Wooldridge, Introductory Econometrics, 6th ed., table 2.3).
//
// A demand system of this form is the "double-log" system of Deaton &
// Muellbauer, Economics and Consumer Behavior (1980), section 3.1, with
// prices made endogenous and identified by cost shifters (Berry 1994,
// RAND Journal of Economics 25(2), 242-262, section 2, on cost-side
// instruments). p is a prepared panel (see Prepare).
func EstimateCross(p *Panel, s *Spec, workers int) (*CrossPrice, error) {
	if err := checkProductSpec(s, "--cross"); err != nil {
		return nil, err
	}
	if s.Unit == "" || s.Time == "" {
		return nil, fmt.Errorf("%w: --cross matches each product's price with the other products' prices in the same market and period: set --unit (for example store) and --time (for example week)", ErrSpec)
	}
	pcodes, levels, prods, err := productLevels(p, s.Product)
	if err != nil {
		return nil, err
	}
	nP := len(prods)
	if nP < 2 {
		return nil, fmt.Errorf("%w: --cross needs at least two products; column %q has only %q", ErrSpec, s.Product, levels[prods[0]])
	}
	names := make([]string, nP)
	slot := make([]int, len(levels))
	for l := range slot {
		slot[l] = -1
	}
	for k, l := range prods {
		slot[l] = k
		names[k] = levels[l]
	}
	ucodes, ulev, err := p.IDs(s.Unit)
	if err != nil {
		return nil, err
	}
	tcodes, tlev, err := p.IDs(s.Time)
	if err != nil {
		return nil, err
	}
	price, err := p.Float(s.Price)
	if err != nil {
		return nil, err
	}
	qty, err := p.Float(s.Quantity)
	if err != nil {
		return nil, err
	}

	// at[key*nP + k] is the row of product k at the key, or -1.
	keyOf := map[int64]int32{}
	var at []int32
	rowKey := make([]int32, p.N)
	nT := int64(len(tlev))
	for i := 0; i < p.N; i++ {
		rowKey[i] = -1
		if pcodes[i] < 0 || ucodes[i] < 0 || tcodes[i] < 0 || math.IsNaN(price[i]) {
			continue
		}
		k := int64(ucodes[i])*nT + int64(tcodes[i])
		key, ok := keyOf[k]
		if !ok {
			key = int32(len(keyOf))
			keyOf[k] = key
			for range nP {
				at = append(at, -1)
			}
		}
		pos := int(key)*nP + slot[pcodes[i]]
		if r := at[pos]; r >= 0 {
			return nil, fmt.Errorf("%w: %s: product %q has two rows for %s %q and %s %q (lines %d and %d); the cross-price model needs one row per product, market and period: aggregate them first",
				ErrDuplicateKey, p.Source, levels[pcodes[i]], s.Unit, ulev[ucodes[i]], s.Time, tlev[tcodes[i]], p.Line(int(r)), p.Line(i))
		}
		at[pos] = int32(i)
		rowKey[i] = key
	}
	nK := len(keyOf)
	m := Matched{Keys: nK, Pairs: make([][]int, nP)}
	for i := range m.Pairs {
		m.Pairs[i] = make([]int, nP)
	}
	complete := make([]bool, nK)
	for key := 0; key < nK; key++ {
		row := at[key*nP : (key+1)*nP]
		all := true
		for i, ri := range row {
			if ri < 0 {
				all = false
				continue
			}
			for j, rj := range row {
				if rj >= 0 {
					m.Pairs[i][j]++
				}
			}
		}
		if all {
			complete[key] = true
			m.Complete++
		}
	}

	if m.Complete == 0 {
		return nil, &NoSharedKeysError{Unit: s.Unit, Time: s.Time, Products: names, Matched: m, Need: 1}
	}

	// Shifters: product-specific when they differ across the products
	// priced within a key.
	var specific, common []string
	for _, z := range s.Shifters {
		zc, err := p.Float(z)
		if err != nil {
			return nil, err
		}
		varies := false
		for key := 0; key < nK && !varies; key++ {
			row := at[key*nP : (key+1)*nP]
			first := math.NaN()
			for _, r := range row {
				if r < 0 {
					continue
				}
				v := zc[r]
				if math.IsNaN(v) {
					continue
				}
				if math.IsNaN(first) {
					first = v
				} else if math.Abs(v-first) > 1e-9*(1+math.Abs(first)) {
					varies = true
					break
				}
			}
		}
		if varies {
			specific = append(specific, z)
		} else {
			common = append(common, z)
		}
	}
	if s.Estimator != "ols" && len(specific)*nP+len(common) < nP {
		return nil, &CrossOrderError{Products: names, Specific: specific, Common: common}
	}
	nInstr := len(specific)*nP + len(common)
	need := nP + len(s.Controls) + nInstr + 2
	if m.Complete < need {
		return nil, &NoSharedKeysError{Unit: s.Unit, Time: s.Time, Products: names, Matched: m, Need: need}
	}

	// Log price on the rows that enter (a bad price there is an error).
	form := s.Form
	if form == "" {
		form = "log-log"
	}
	enter := make([]bool, p.N)
	for key := 0; key < nK; key++ {
		if complete[key] {
			for _, r := range at[key*nP : (key+1)*nP] {
				enter[r] = true
			}
		}
	}
	xp := price
	if form == "log-log" {
		if xp, err = logColumn(p, s.Price, price, enter, "price"); err != nil {
			return nil, err
		}
	}
	yq := qty
	if form != "linear" {
		// Missing quantities stay NaN and are dropped by Build.
		yq = make([]float64, p.N)
		for i, v := range qty {
			switch {
			case !enter[i]:
				yq[i] = math.NaN()
			case v <= 0:
				return nil, fmt.Errorf("%w: %s: line %d: quantity column %q is %g; a log model cannot use it: drop such rows with --where '%s > 0' if they are data errors or stock-outs, or choose --form linear",
					ErrNonPositiveLog, p.Source, p.Line(i), s.Quantity, v, s.Quantity)
			default:
				yq[i] = math.Log(v)
			}
		}
	}

	c := &CrossPrice{
		Products: names, Band: "wald", Level: s.Level, Form: form, Unit: s.Unit, Time: s.Time, Matched: m,
		Specific: nonNil(specific), Common: nonNil(common), Instruments: nInstr,
		Controls: nonNil(s.Controls), FE: nonNil(s.FE), Warnings: []string{},
		Matrix: square(nP), StdErrors: square(nP), CILow: square(nP), CIHigh: square(nP), FirstStageF: square(nP),
		N: make([]int, nP),
	}
	if c.Level == 0 {
		c.Level = 0.95
	}
	if len(specific) == 0 && nP > 1 {
		c.Warnings = append(c.Warnings, "no shifter differs across products within a market and period, so own and cross effects are told apart only by how differently the common shifters move each product's price; expect wide bands")
	}
	if m.Complete*2 < m.Keys {
		c.Warnings = append(c.Warnings, fmt.Sprintf("only %d of %d %s × %s keys hold all %d products; the matrix describes those markets and periods", m.Complete, m.Keys, s.Unit, s.Time, nP))
	}
	pl := s.Price
	if form == "log-log" {
		pl = "ln " + s.Price
	}
	for i := range nP {
		keep := make([]bool, p.N)
		var rows []int
		for r := 0; r < p.N; r++ {
			if rowKey[r] >= 0 && complete[rowKey[r]] && slot[pcodes[r]] == i {
				keep[r] = true
				rows = append(rows, r)
			}
		}
		sub := p.Subset(keep)
		spec := Spec{
			Data: s.Data, Unit: s.Unit, Time: s.Time, Exogenous: s.Controls,
			FE: s.FE, Cluster: s.Cluster, Vcov: s.Vcov, Estimator: s.Estimator, Level: s.Level,
			MaxSweeps: s.MaxSweeps, Tolerance: s.Tolerance,
		}
		wide := func(base string, col []float64, j int) string {
			name := uniqueName(sub, base+" ["+names[j]+"]")
			x := make([]float64, len(rows))
			for a, r := range rows {
				x[a] = col[at[int(rowKey[r])*nP+j]]
			}
			sub.AddNum(name, x)
			return name
		}
		spec.Outcome = uniqueName(sub, map[bool]string{true: s.Quantity, false: "ln " + s.Quantity}[form == "linear"])
		y := make([]float64, len(rows))
		for a, r := range rows {
			y[a] = yq[r]
		}
		sub.AddNum(spec.Outcome, y)
		for j := range nP {
			spec.Endogenous = append(spec.Endogenous, wide(pl, xp, j))
		}
		for _, z := range specific {
			zc := p.Num[z]
			for j := range nP {
				spec.Instruments = append(spec.Instruments, wide(z, zc, j))
			}
		}
		spec.Instruments = append(spec.Instruments, common...)
		what := fmt.Sprintf("--cross, equation of %s (%d %s × %s keys hold all %d products)", names[i], m.Complete, s.Unit, s.Time, nP)
		d, err := Build(sub, &spec, workers)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", what, err)
		}
		fit, fs, err := d.Fit()
		if err != nil {
			return nil, fmt.Errorf("%s: %w", what, err)
		}
		if c.Estimator == "" {
			c.Estimator, c.Vcov, c.VcovDetail = fit.Estimator.String(), fit.Vcov.Kind.String(), fit.Vcov.Label
		}
		c.N[i] = d.N
		crit := ivcore.Critical(d.Level, fit.Vcov.DF)
		// Means over the rows used, for the non-log forms.
		var mq float64
		mp := make([]float64, nP)
		for _, r := range d.Rows {
			orig := rows[r]
			mq += qty[orig]
			for j := range nP {
				mp[j] += price[at[int(rowKey[orig])*nP+j]]
			}
		}
		mq /= float64(d.N)
		for j := range nP {
			mp[j] /= float64(d.N)
			idx := fit.Index(spec.Endogenous[j])
			sc := elasticityScale(form, mp[j], mq)
			e, se := sc*fit.Coef[idx], math.Abs(sc)*fit.SE(idx)
			c.Matrix[i][j], c.StdErrors[i][j] = e, se
			c.CILow[i][j], c.CIHigh[i][j] = e-crit*se, e+crit*se
			if j < len(fs) {
				c.FirstStageF[i][j] = fs[j].F.F
				if fs[j].F.F < WeakF {
					c.Warnings = append(c.Warnings, fmt.Sprintf("equation of %s: weak first stage for the price of %s (F = %.1f < %d)", names[i], names[j], fs[j].F.F, WeakF))
				}
			}
			if j == i && e > 0 {
				c.Warnings = append(c.Warnings, fmt.Sprintf("%s: positive own-price elasticity %.3g is implausible for demand; check the shifters and the data", names[i], e))
			}
			if j == i {
				c.Fits = append(c.Fits, &ProductFit{Product: names[i], Design: d, Fit: fit, FirstStage: fs, Index: idx, Scale: sc})
			}
		}
	}
	return c, nil
}

func square(n int) [][]float64 {
	out := make([][]float64, n)
	for i := range out {
		out[i] = make([]float64, n)
	}
	return out
}
