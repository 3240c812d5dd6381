package demand

import (
	"errors"
	"fmt"
	"strings"

	"priceiv/ivcore"
)

// Interval is one piece of a confidence set. A nil end is unbounded on
// that side (JSON has no infinity).
type Interval struct {
	Low  *float64 `json:"low"`
	High *float64 `json:"high"`
}

// RobustBand is a confidence set that stays valid when the shifters are
// weak, such as the Anderson-Rubin set. It can be one interval, a union of
// two unbounded rays, the whole line or empty, so it is kept as pieces.
// demand leaves it nil; the diagnostics layer fills it.
type RobustBand struct {
	// Method names the test inverted, for example "anderson-rubin".
	Method string `json:"method"`
	// Level is the confidence level.
	Level float64 `json:"level"`
	// Pieces are disjoint intervals in increasing order. No piece means
	// the set is empty (the model is rejected at every value).
	Pieces []Interval `json:"pieces"`
}

// ProductElasticity is one product's own-price elasticity with its bands
// and the checks a pricing meeting needs beside it.
type ProductElasticity struct {
	Product string `json:"product"`
	// N is the number of observations behind the estimate.
	N int `json:"n"`
	// OwnPrice is the elasticity; StdError its standard error.
	OwnPrice float64 `json:"own_price"`
	StdError float64 `json:"std_error"`
	// CILow and CIHigh bound the Wald band at Level (b ± t·se; the delta
	// method with the means held fixed for semi-log and linear forms).
	CILow  float64 `json:"ci_low"`
	CIHigh float64 `json:"ci_high"`
	// Band names the method of CILow and CIHigh ("wald").
	Band  string  `json:"band"`
	Level float64 `json:"level"`
	// AR is the Anderson-Rubin set, when it has been computed.
	AR *RobustBand `json:"ar_band"`
	// FirstStageF is the first-stage F of the excluded shifters for this
	// product's price, with the same covariance as the estimate.
	FirstStageF float64 `json:"first_stage_f"`
	// EffectiveF is the Montiel Olea-Pflueger effective F, when known.
	// With one shifter it equals FirstStageF (see EstimateByProduct).
	EffectiveF *float64 `json:"effective_f"`
	// Clusters is the number of clusters (smallest way), 0 without
	// clustering.
	Clusters int `json:"clusters,omitempty"`
	// At says where the elasticity is evaluated.
	At string `json:"at"`
	// Failed is true when the product could not be estimated; Warnings
	// then says why and the numbers are zero.
	Failed bool `json:"failed"`
	// Warnings lists what a reader should know before using the number.
	Warnings []string `json:"warnings"`
	// Where the product's prices and units sit in the data (rows used).
	PriceStats
	// Bootstrap is the cluster-bootstrap percentile band, when asked for.
	Bootstrap *BootstrapBand `json:"bootstrap,omitempty"`
	// BootstrapDraws are the replicate draws of the elasticity.
	BootstrapDraws []float64 `json:"bootstrap_draws,omitempty"`
}

// EqualityTest is the Wald test that all products share one elasticity.
type EqualityTest struct {
	// Chi2 is the Wald statistic of the Q = P-1 restrictions
	// e_1 = e_2 = … = e_P; F = Chi2/Q with DF denominator degrees of
	// freedom.
	Chi2 float64 `json:"chi2"`
	F    float64 `json:"f"`
	Q    int     `json:"q"`
	DF   int     `json:"df"`
	P    float64 `json:"p_value"`
}

// ProductFit keeps the estimation behind one product's row, for layers
// that compute more from it (Anderson-Rubin bands, effective F, bootstrap).
// In the pooled interaction model every product shares one Design and Fit
// and Index tells which coefficient is the product's price term.
type ProductFit struct {
	Product    string
	Design     *Design
	Fit        *ivcore.Fit
	FirstStage []ivcore.FirstStage
	// Index is the position of the product's price coefficient in
	// Fit.Names (and of its first stage in FirstStage).
	Index int
	// Scale turns the coefficient into the elasticity (1 for log-log).
	Scale float64
}

// ProductTable is the per-product own-price elasticity table.
type ProductTable struct {
	// Mode is "by product" (one regression per product) or "interact
	// product" (one pooled regression with price × product terms).
	Mode          string   `json:"mode"`
	ProductColumn string   `json:"product_column"`
	Source        string   `json:"source"`
	Form          string   `json:"form"`
	Estimator     string   `json:"estimator"`
	Vcov          string   `json:"vcov"`
	VcovDetail    string   `json:"vcov_detail,omitempty"`
	Level         float64  `json:"level"`
	Shifters      []string `json:"shifters"`
	Controls      []string `json:"controls"`
	FE            []string `json:"fixed_effects"`
	// N is the number of rows used over all products.
	N int `json:"n"`
	// Elasticities has one row per product, in the order of the product
	// column's levels.
	Elasticities []ProductElasticity `json:"elasticities"`
	// Equal is the test that all products share one elasticity
	// (interaction model only).
	Equal   *EqualityTest `json:"equal_elasticities,omitempty"`
	Dropped []Drop        `json:"dropped"`
	Notes   []string      `json:"notes"`
	// Fits holds the estimation behind each row (nil for failed rows).
	Fits []*ProductFit `json:"-"`
}

// Thresholds of the warnings attached to product rows.
const (
	// WeakF is the rule-of-thumb first-stage F below which shifters are
	// called weak (Staiger & Stock 1997, Econometrica 65(3), 557-586).
	WeakF = 10
	// FewClusters is the number of clusters below which cluster-robust
	// Wald bands tend to be too narrow (Cameron & Miller 2015, "A
	// Practitioner's Guide to Cluster-Robust Inference", Journal of
	// Human Resources 50(2), 317-372, section VI).
	FewClusters = 30
)

// productLevels returns the product column's codes and the levels that
// occur in the panel, in level order, with their row counts.
func productLevels(p *Panel, col string) (codes []int32, levels []string, used []int, err error) {
	if col == "" {
		return nil, nil, nil, fmt.Errorf("%w: per-product and cross-price models need the product column: set --product (for example --product product)", ErrSpec)
	}
	if !p.Has(col) {
		return nil, nil, nil, p.unknown(col)
	}
	codes, levels, err = p.IDs(col)
	if err != nil {
		return nil, nil, nil, err
	}
	count := make([]int, len(levels))
	for _, c := range codes {
		if c >= 0 {
			count[c]++
		}
	}
	for l, n := range count {
		if n > 0 {
			used = append(used, l)
		}
	}
	return codes, levels, used, nil
}

// checkProductSpec checks what every per-product model needs.
func checkProductSpec(s *Spec, what string) error {
	if err := s.Check(); err != nil {
		return err
	}
	if !s.DemandForm() {
		return fmt.Errorf("%w: %s needs the demand form (--quantity, --price, --shifters): the price is the regressor split by product", ErrSpec, what)
	}
	if s.Product == "" {
		return fmt.Errorf("%w: %s needs the product column: set --product (for example --product product)", ErrSpec, what)
	}
	for _, c := range s.Cluster {
		if c == s.Product {
			return fmt.Errorf("%w: %s splits the panel by %q, so clustering by %q leaves one cluster per product: cluster by a market column (for example the store) instead", ErrSpec, what, s.Product, c)
		}
	}
	if len(s.Shifters) == 0 && s.Estimator != "ols" {
		return &ivcore.OrderError{Endogenous: []string{s.Price}}
	}
	return nil
}

// EstimateByProduct fits the spec's demand model once per product, on
// the rows of that product only, with the same fixed effects, controls,
// shifters, estimator and covariance:
//
//	ln q_it = a + e_i ln p_it + controls + FE + u_it,   rows of product i
//
// p is a prepared panel (see Prepare). A product whose model cannot be
// fitted (for example a shifter constant within its fixed effects) gets a
// row with Failed set and the reason as a warning; EstimateByProduct
// returns an error only when the spec is unusable or no product could be
// fitted.
//
// With a single shifter the robust first-stage F equals the effective F
// of Montiel Olea & Pflueger (2013, JBES 31(3), section 2):
//
//	F_eff = π̂ᵀQπ̂ / tr(V̂(π̂)Q) = π̂²/V̂(π̂)   when π̂ is a scalar
//
// so EffectiveF is filled then; with several shifters it is left nil for
// the diagnostics layer.
func EstimateByProduct(p *Panel, s *Spec, workers int) (*ProductTable, error) {
	if err := checkProductSpec(s, "--by product"); err != nil {
		return nil, err
	}
	codes, levels, used, err := productLevels(p, s.Product)
	if err != nil {
		return nil, err
	}
	t := newProductTable("by product", p, s)
	missing := 0
	for _, c := range codes {
		if c < 0 {
			missing++
		}
	}
	if missing > 0 {
		t.Dropped = append(t.Dropped, Drop{Reason: "missing value", Column: s.Product, Rows: missing})
	}
	keep := make([]bool, p.N)
	var names []string
	for _, l := range used {
		names = append(names, levels[l])
	}
	err = fillProducts(t, names, func(k int) (*Design, error) {
		l := used[k]
		for i, c := range codes {
			keep[i] = c == int32(l)
		}
		return Build(p.Subset(keep), s, workers)
	})
	if err != nil {
		return nil, err
	}
	return t, nil
}

// fillProducts fits the design of each named product, in order, into
// the table. A product whose design or fit fails gets a row with Failed
// set; errors of the spec itself end the table.
func fillProducts(t *ProductTable, names []string, design func(k int) (*Design, error)) error {
	var failures []string
	for k, name := range names {
		var row ProductElasticity
		var pf *ProductFit
		d, err := design(k)
		if err == nil {
			row, pf, err = productRow(d, name)
		}
		if errors.Is(err, ErrSpec) || errors.Is(err, ErrUnknownColumn) || errors.Is(err, ErrNotNumeric) {
			return err // the same for every product
		}
		if err != nil {
			failures = append(failures, fmt.Sprintf("%s: %v", name, err))
			row = ProductElasticity{Product: name, Band: "wald", Level: t.Level, Failed: true,
				Warnings: []string{"not estimated: " + err.Error()}}
		} else {
			t.N += row.N
			if t.Estimator == "" {
				t.Estimator, t.Vcov, t.VcovDetail = pf.Fit.Estimator.String(), pf.Fit.Vcov.Kind.String(), pf.Fit.Vcov.Label
				t.Form = pf.Design.Form
			}
			for _, d := range pf.Design.Dropped {
				addDrop(&t.Dropped, d)
			}
		}
		t.Elasticities = append(t.Elasticities, row)
		t.Fits = append(t.Fits, pf)
	}
	if len(failures) == len(names) {
		return fmt.Errorf("no product could be estimated: %s", strings.Join(failures, "; "))
	}
	if t.Form == "" {
		t.Form = "log-log"
	}
	return nil
}

func newProductTable(mode string, p *Panel, s *Spec) *ProductTable {
	t := &ProductTable{
		Mode: mode, ProductColumn: s.Product, Source: p.Source, Level: s.Level,
		Shifters: nonNil(s.Shifters), Controls: nonNil(s.Controls), FE: nonNil(s.FE),
		Elasticities: []ProductElasticity{}, Dropped: []Drop{}, Notes: []string{},
	}
	if t.Level == 0 {
		t.Level = 0.95
	}
	return t
}

func nonNil(s []string) []string {
	if s == nil {
		return []string{}
	}
	return append([]string(nil), s...)
}

// addDrop adds d to the list, merging it with an entry of the same reason
// and column.
func addDrop(list *[]Drop, d Drop) {
	for i := range *list {
		if (*list)[i].Reason == d.Reason && (*list)[i].Column == d.Column {
			(*list)[i].Rows += d.Rows
			return
		}
	}
	*list = append(*list, d)
}

// productRow fits one product's design and gives its row of the table.
func productRow(d *Design, name string) (ProductElasticity, *ProductFit, error) {
	fit, fs, err := d.Fit()
	if err != nil {
		return ProductElasticity{}, nil, err
	}
	res := d.Summarize(fit, fs)
	e := res.Elasticity[0]
	j := fit.Index(d.Names[d.Model.Endog[0]])
	row := ProductElasticity{
		Product: name, N: d.N, OwnPrice: e.OwnPrice, StdError: e.StdError, CILow: e.CILow, CIHigh: e.CIHigh,
		Band: "wald", Level: d.Level, At: e.At, Warnings: []string{}, PriceStats: d.PriceStats,
	}
	if len(fit.Vcov.Clusters) > 0 {
		row.Clusters = minInt(fit.Vcov.Clusters)
	}
	if len(fs) > 0 {
		row.FirstStageF = fs[0].F.F
		if len(d.Model.Instr) == 1 {
			f := fs[0].F.F
			row.EffectiveF = &f
		}
	}
	var signs []signCheck
	var first *ivcore.Fit
	if len(fs) > 0 {
		first = fs[0].Fit
		for a, pos := range fs[0].Excluded {
			signs = append(signs, signCheck{pos: pos, name: d.Names[d.Model.Instr[a]]})
		}
	}
	row.Warnings = productWarnings(row, first, signs)
	return row, &ProductFit{Product: name, Design: d, Fit: fit, FirstStage: fs, Index: j, Scale: elasticityScale(d.Form, d.MeanPrice, d.MeanQuantity)}, nil
}

func minInt(x []int) int {
	m := x[0]
	for _, v := range x[1:] {
		m = min(m, v)
	}
	return m
}

// elasticityScale returns s in e = s·b for a price coefficient b:
//
//	log-log: s = 1,   semi-log: s = p̄,   linear: s = p̄/q̄
//
// with the means taken over the rows used (Wooldridge, Introductory
// Econometrics, 6th ed., section 2.4 and table 2.3 on functional forms).
func elasticityScale(form string, meanP, meanQ float64) float64 {
	switch form {
	case "semi-log":
		return meanP
	case "linear":
		return meanP / meanQ
	}
	return 1
}

// signCheck names a first-stage coefficient whose sign is checked: pos
// is its position in the first-stage fit.
type signCheck struct {
	pos  int
	name string
}

// productWarnings lists the checks of one product row: a weak first
// stage (row.FirstStageF), a shifter that lowers price in the first-stage
// fit first, a positive or inelastic estimate, and too few clusters.
func productWarnings(row ProductElasticity, first *ivcore.Fit, signs []signCheck) []string {
	w := []string{}
	if first != nil {
		if row.FirstStageF < WeakF {
			w = append(w, fmt.Sprintf("weak first stage: F = %.1f is below the rule of thumb %d, so the estimate may be biased toward least squares and the Wald band too narrow; use the Anderson-Rubin band", row.FirstStageF, WeakF))
		}
		for _, sc := range signs {
			c, se := first.Coef[sc.pos], first.SE(sc.pos)
			if c < 0 {
				w = append(w, fmt.Sprintf("shifter %q lowers this price in the first stage (coefficient %.3g, t = %.1f); a cost shifter should raise price: check its sign and timing", sc.name, c, c/se))
			}
		}
	}
	switch {
	case row.OwnPrice > 0:
		w = append(w, "positive own-price elasticity: implausible for demand; check the shifters, the fixed effects and the product's data")
	case row.OwnPrice > -1:
		w = append(w, "inelastic estimate (between -1 and 0): a profit-maximising seller would not price here, so no margin follows from it")
	}
	if row.Clusters > 0 && row.Clusters < FewClusters {
		w = append(w, fmt.Sprintf("only %d clusters: cluster-robust bands tend to be too narrow with fewer than about %d", row.Clusters, FewClusters))
	}
	return w
}
