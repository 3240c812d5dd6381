package elasticity

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"strings"

	"gonum.org/v1/gonum/mat"
)

// EstimateFile is the part of an estimate written as JSON (priceiv
// estimate --format json, pooled, per product or cross-price) that
// simulations read. Fields it does not know are ignored, and optional ones
// may be missing.
type EstimateFile struct {
	// Level and DF describe the bands (DF 0: normal reference).
	Level float64 `json:"level"`
	DF    int     `json:"df"`
	// Elasticities are the own-price elasticities, one per product, or
	// a single one named "all" for a pooled model.
	Elasticities []FileElasticity `json:"elasticities"`
	// CrossPrice is the own- and cross-price matrix, when estimated.
	CrossPrice *FileCrossPrice `json:"cross_price"`
}

// FileElasticity is one own-price elasticity in an estimate file.
type FileElasticity struct {
	Product  string   `json:"product"`
	OwnPrice *float64 `json:"own_price"`
	StdError *float64 `json:"std_error"`
	CILow    *float64 `json:"ci_low"`
	CIHigh   *float64 `json:"ci_high"`
	Level    float64  `json:"level"`
	// Failed marks a product that could not be estimated; Warnings say
	// why.
	Failed   bool     `json:"failed"`
	Warnings []string `json:"warnings"`
	// Optional: where the product's prices and units sit in the data.
	MeanPrice    *float64 `json:"mean_price"`
	MeanQuantity *float64 `json:"mean_quantity"`
	PriceMin     *float64 `json:"price_min"`
	PriceMax     *float64 `json:"price_max"`
	// Optional: bootstrap draws of the elasticity.
	BootstrapDraws []float64 `json:"bootstrap_draws"`
}

// FileCrossPrice is the cross-price elasticity matrix of an estimate file:
// Matrix[i][j] is the elasticity of product i's quantity with respect to
// product j's price.
type FileCrossPrice struct {
	Products  []string    `json:"products"`
	Matrix    [][]float64 `json:"matrix"`
	StdErrors [][]float64 `json:"std_errors"`
	CILow     [][]float64 `json:"ci_low"`
	CIHigh    [][]float64 `json:"ci_high"`
	Level     float64     `json:"level"`
	// Optional: covariance of the row-major vectorised matrix, and
	// bootstrap draws of the whole matrix.
	Covariance     [][]float64   `json:"covariance"`
	BootstrapDraws [][][]float64 `json:"bootstrap_draws"`
}

// ReadEstimateFile reads an estimate file written with --format json.
func ReadEstimateFile(path string) (*EstimateFile, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("cannot read the elasticities file: %w", err)
	}
	var f EstimateFile
	if err := json.Unmarshal(data, &f); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			line := 1 + strings.Count(string(data[:min(int(se.Offset), len(data))]), "\n")
			return nil, fmt.Errorf("%s, line %d: not valid JSON (%v); give the file written by priceiv estimate --format json", path, line, se)
		}
		return nil, fmt.Errorf("%s: %v; give the file written by priceiv estimate --format json", path, err)
	}
	if len(f.Elasticities) == 0 && f.CrossPrice == nil {
		return nil, fmt.Errorf("%s holds no elasticities: estimate a model with a price (priceiv estimate ... --format json) and give that file", path)
	}
	return &f, nil
}

// PooledProduct is the product name of an elasticity estimated for all
// products together.
const PooledProduct = "all"

// Pooled reports whether the file holds one elasticity for all products.
func (f *EstimateFile) Pooled() bool {
	return f.CrossPrice == nil && len(f.Elasticities) == 1 && f.Elasticities[0].Product == PooledProduct
}

// Products returns the products of the file (nil when Pooled).
func (f *EstimateFile) Products() []string {
	if f.CrossPrice != nil {
		return append([]string(nil), f.CrossPrice.Products...)
	}
	if f.Pooled() {
		return nil
	}
	var p []string
	for _, e := range f.Elasticities {
		p = append(p, e.Product)
	}
	return p
}

// level returns the band level of the file: the top-level one, else the
// matrix's or the first elasticity's, else 0.95.
func (f *EstimateFile) level() float64 {
	for _, l := range []float64{f.Level, f.crossLevel(), f.firstLevel()} {
		if l > 0 && l < 1 {
			return l
		}
	}
	return 0.95
}

func (f *EstimateFile) crossLevel() float64 {
	if f.CrossPrice == nil {
		return 0
	}
	return f.CrossPrice.Level
}

func (f *EstimateFile) firstLevel() float64 {
	if len(f.Elasticities) == 0 {
		return 0
	}
	return f.Elasticities[0].Level
}

// crit returns the critical value the file's Wald bands were built with,
// (ci_high - e)/se of the first elasticity that has all three, or 0.
func (f *EstimateFile) crit() float64 {
	for _, e := range f.Elasticities {
		if e.OwnPrice != nil && e.StdError != nil && e.CIHigh != nil && *e.StdError > 0 {
			return (*e.CIHigh - *e.OwnPrice) / *e.StdError
		}
	}
	if c := f.CrossPrice; c != nil && c.StdErrors != nil && c.CIHigh != nil {
		for i := range c.Matrix {
			if i < len(c.StdErrors) && i < len(c.CIHigh) && i < len(c.StdErrors[i]) && i < len(c.CIHigh[i]) && c.StdErrors[i][i] > 0 {
				return (c.CIHigh[i][i] - c.Matrix[i][i]) / c.StdErrors[i][i]
			}
		}
	}
	return 0
}

// Estimates turns the file into Estimates. products names the line: it
// must be nil unless the file is Pooled, in which case the one elasticity
// is given to every product (perfectly correlated across them, no cross
// effects). name labels the file in errors.
//
// Estimates returns an error for a product that could not be estimated, a
// product listed twice, a missing own_price, and matrices that are not
// one row and one column per product.
func (f *EstimateFile) Estimates(name string, products []string) (*Estimates, error) {
	est := &Estimates{Level: f.level(), DF: f.DF, Crit: f.crit(), OwnBand: "Wald"}
	for _, e := range f.Elasticities {
		if e.Failed {
			why := ""
			if len(e.Warnings) > 0 {
				why = " (" + strings.Join(e.Warnings, "; ") + ")"
			}
			return nil, fmt.Errorf("%s: product %q could not be estimated%s; a what-if needs an elasticity for every product of the line: fix its estimate or leave the product out of the model", name, e.Product, why)
		}
	}
	switch {
	case f.Pooled():
		if len(products) == 0 {
			return nil, fmt.Errorf("%s holds one elasticity for all products together: give the products and their prices with --prices FILE", name)
		}
		return f.pooled(est, name, products)
	case products != nil:
		panic("elasticity: products are given only for a pooled estimate file")
	case f.CrossPrice != nil:
		return f.cross(est, name)
	}
	return f.ownOnly(est, name)
}

func val(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

func (f *EstimateFile) pooled(est *Estimates, name string, products []string) (*Estimates, error) {
	e := f.Elasticities[0]
	if e.OwnPrice == nil {
		return nil, fmt.Errorf("%s: the elasticity has no own_price value", name)
	}
	n := len(products)
	est.Products = append([]string(nil), products...)
	est.Pooled = true
	est.E = mat.NewDense(n, n, nil)
	est.OwnLo, est.OwnHi = make([]float64, n), make([]float64, n)
	se := val(e.StdError)
	if !math.IsNaN(se) {
		est.SE = mat.NewDense(n, n, nil)
		est.Cov = mat.NewSymDense(n*n, nil)
	}
	for i := range n {
		est.E.Set(i, i, *e.OwnPrice)
		est.OwnLo[i], est.OwnHi[i] = val(e.CILow), val(e.CIHigh)
		if est.SE != nil {
			est.SE.Set(i, i, se)
			for j := i; j < n; j++ {
				est.Cov.SetSym(i*n+i, j*n+j, se*se) // one parameter shared by all
			}
		}
	}
	for _, d := range e.BootstrapDraws {
		m := make([]float64, n*n)
		for i := range n {
			m[i*n+i] = d
		}
		est.Draws = append(est.Draws, m)
	}
	est.Notes = append(est.Notes, "the model estimated one elasticity for all products together; it is applied to each product, and the products are simulated as if their sales did not affect each other")
	return est, nil
}

func (f *EstimateFile) cross(est *Estimates, name string) (*Estimates, error) {
	c := f.CrossPrice
	n := len(c.Products)
	if n == 0 {
		return nil, fmt.Errorf("%s: cross_price lists no products", name)
	}
	for i, p := range c.Products {
		if contains(c.Products[:i], p) {
			return nil, fmt.Errorf("%s: product %q appears twice in cross_price.products", name, p)
		}
	}
	dense := func(m [][]float64, what string) (*mat.Dense, error) {
		if err := checkSquare(m, n, name, what); err != nil {
			return nil, err
		}
		d := mat.NewDense(n, n, nil)
		for i, r := range m {
			for j, v := range r {
				d.Set(i, j, v)
			}
		}
		return d, nil
	}
	var err error
	est.Products = append([]string(nil), c.Products...)
	est.Cross = true
	if est.E, err = dense(c.Matrix, "cross_price.matrix"); err != nil {
		return nil, err
	}
	if c.StdErrors != nil {
		if est.SE, err = dense(c.StdErrors, "cross_price.std_errors"); err != nil {
			return nil, err
		}
	}
	var lo, hi *mat.Dense
	if c.CILow != nil && c.CIHigh != nil {
		if lo, err = dense(c.CILow, "cross_price.ci_low"); err != nil {
			return nil, err
		}
		if hi, err = dense(c.CIHigh, "cross_price.ci_high"); err != nil {
			return nil, err
		}
	}
	if c.Covariance != nil {
		if err := checkSquare(c.Covariance, n*n, name, "cross_price.covariance"); err != nil {
			return nil, err
		}
		est.Cov = mat.NewSymDense(n*n, nil)
		for i := range n * n {
			for j := i; j < n*n; j++ {
				est.Cov.SetSym(i, j, (c.Covariance[i][j]+c.Covariance[j][i])/2)
			}
		}
	}
	for b, d := range c.BootstrapDraws {
		if err := checkSquare(d, n, name, fmt.Sprintf("cross_price.bootstrap_draws[%d]", b)); err != nil {
			return nil, err
		}
		m := make([]float64, 0, n*n)
		for _, r := range d {
			m = append(m, r...)
		}
		est.Draws = append(est.Draws, m)
	}
	own := map[string]FileElasticity{}
	for _, e := range f.Elasticities {
		own[e.Product] = e
	}
	est.OwnLo, est.OwnHi = nanSlice(n), nanSlice(n)
	for i, p := range est.Products {
		switch e, ok := own[p]; {
		case lo != nil:
			est.OwnLo[i], est.OwnHi[i] = lo.At(i, i), hi.At(i, i)
		case ok && e.OwnPrice != nil && *e.OwnPrice == est.E.At(i, i):
			est.OwnLo[i], est.OwnHi[i] = val(e.CILow), val(e.CIHigh)
		case est.SE != nil:
			h := est.crit() * est.SE.At(i, i)
			est.OwnLo[i], est.OwnHi[i] = est.E.At(i, i)-h, est.E.At(i, i)+h
		}
	}
	return est, nil
}

func (f *EstimateFile) ownOnly(est *Estimates, name string) (*Estimates, error) {
	n := len(f.Elasticities)
	est.Products = make([]string, n)
	est.E = mat.NewDense(n, n, nil)
	est.OwnLo, est.OwnHi = make([]float64, n), make([]float64, n)
	haveSE := true
	nd := -1
	for i, e := range f.Elasticities {
		if e.Product == "" {
			return nil, fmt.Errorf("%s: elasticity %d has no product name", name, i+1)
		}
		if contains(est.Products[:i], e.Product) {
			return nil, fmt.Errorf("%s: product %q has two elasticities", name, e.Product)
		}
		if e.OwnPrice == nil {
			return nil, fmt.Errorf("%s: the elasticity of %q has no own_price value", name, e.Product)
		}
		est.Products[i] = e.Product
		est.E.Set(i, i, *e.OwnPrice)
		est.OwnLo[i], est.OwnHi[i] = val(e.CILow), val(e.CIHigh)
		haveSE = haveSE && e.StdError != nil
		switch {
		case nd < 0:
			nd = len(e.BootstrapDraws)
		case nd != len(e.BootstrapDraws):
			nd = 0 // unequal numbers of draws cannot be used jointly
		}
	}
	if haveSE {
		est.SE = mat.NewDense(n, n, nil)
		for i, e := range f.Elasticities {
			est.SE.Set(i, i, *e.StdError)
		}
	}
	for b := 0; b < nd; b++ {
		m := make([]float64, n*n)
		for i, e := range f.Elasticities {
			m[i*n+i] = e.BootstrapDraws[b]
		}
		est.Draws = append(est.Draws, m)
	}
	return est, nil
}

// Baseline returns the position of products read from the file's
// optional mean_price, mean_quantity, price_min and price_max (NaN where
// missing, and for a pooled file).
func (f *EstimateFile) Baseline(products []string) Baseline {
	n := len(products)
	b := Baseline{Price: nanSlice(n), Quantity: nanSlice(n), UnitCost: nanSlice(n), PriceMin: nanSlice(n), PriceMax: nanSlice(n)}
	if f.Pooled() {
		return b
	}
	for i, p := range products {
		for _, e := range f.Elasticities {
			if e.Product != p {
				continue
			}
			b.Price[i], b.Quantity[i] = val(e.MeanPrice), val(e.MeanQuantity)
			b.PriceMin[i], b.PriceMax[i] = val(e.PriceMin), val(e.PriceMax)
		}
	}
	return b
}

func nanSlice(n int) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = math.NaN()
	}
	return s
}

func checkSquare(m [][]float64, n int, name, what string) error {
	if len(m) != n {
		return fmt.Errorf("%s: %s has %d rows for %d products; it must be square, one row and one column per product", name, what, len(m), n)
	}
	for i, r := range m {
		if len(r) != n {
			return fmt.Errorf("%s: %s row %d has %d entries for %d products; it must be square", name, what, i+1, len(r), n)
		}
	}
	return nil
}
