package supplyshifters

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// Endogeneity is the regression-based (control-function) Durbin-Wu-Hausman
// test of whether the endogenous regressors need instrumenting at all.
type Endogeneity struct {
	// Residuals holds the coefficient of each first-stage residual v̂_j in
	// the control-function regression
	//
	//	y = X β + W γ + V̂ ρ + e   (OLS)
	//
	// where V̂ = X - Z Π̂ are the first-stage residuals. Under H0: ρ = 0 the
	// regressors are exogenous and OLS is consistent (Wooldridge,
	// Introductory Econometrics, section 15-5; Hausman 1978, Econometrica
	// 46(6), 1251-1271). The covariance is the model's kind: robust or
	// cluster-robust when the model's is. Under H0 the estimated V̂ does
	// not change the test's distribution.
	Residuals []Coef `json:"first_stage_residuals"`
	// Test is the Wald F of ρ = 0 (t² with one endogenous regressor).
	Test Stat `json:"test"`
	// OLS and IV are the OLS estimate and the estimate diagnosed, for the
	// first endogenous regressor.
	OLS Num `json:"ols_estimate"`
	IV  Num `json:"iv_estimate"`
}

// endogeneity fills Diagnostics.Endogeneity. The first-stage residuals
// are combinations of the columns, so the control-function regression is
// fitted on transformed moments (Moments.Transform) without a pass over
// the rows, except the one HC1 needs.
func (c *ctx) endogeneity() error {
	k := len(c.m.Names)
	t := mat.NewDense(k, k+c.p, nil)
	for i := 0; i < k; i++ {
		t.Set(i, i, 1)
	}
	names := append([]string(nil), c.m.Names...)
	var vcols []int
	for j, v := range c.vres {
		for l, w := range v {
			t.Set(l, k+j, w)
		}
		names = append(names, "first-stage residual of "+c.endogNames[j])
		vcols = append(vcols, k+j)
	}
	mt := c.m.Transform(t, names, false) // HC1 uses c.m's rows through T
	md := ivcore.Model{Y: c.md.Y, Exog: append(c.md.X(), vcols...)}
	fit, err := ivcore.Estimate(mt, md, ivcore.OLS, c.vk)
	if err != nil {
		return fmt.Errorf("supplyshifters: control-function regression: %w", err)
	}
	e := &Endogeneity{}
	var pos []int
	for j := range c.vres {
		i := fit.Index(names[k+j])
		pos = append(pos, i)
		tt, p := c.tStatDF(fit.Coef[i], fit.SE(i), fit.Vcov.DF)
		e.Residuals = append(e.Residuals, Coef{Name: names[k+j], Estimate: Num(fit.Coef[i]), StdError: Num(fit.SE(i)), T: Num(tt), P: Num(p)})
	}
	w, err := ivcore.Wald(fit.Coef, fit.Cov, ivcore.Select(pos, len(fit.Coef)), nil, fit.Vcov.DF)
	e.Test = Stat{Name: "control-function Durbin-Wu-Hausman", DF1: c.p, DF2: fit.Vcov.DF}
	if fit.Vcov.DF <= 0 {
		e.Test.Dist = fmt.Sprintf("χ²(%d)/%d", c.p, c.p)
	} else {
		e.Test.Dist = fmt.Sprintf("F(%d, %d)", c.p, fit.Vcov.DF)
	}
	if err != nil {
		e.Test.Value, e.Test.P = Num(math.NaN()), Num(math.NaN())
	} else {
		e.Test.Value, e.Test.P = Num(w.F), Num(w.P)
	}
	if ols, err := ivcore.Estimate(c.m, c.md, ivcore.OLS, ivcore.IID); err == nil {
		e.OLS = Num(ols.Coef[0])
	} else {
		e.OLS = Num(math.NaN())
	}
	e.IV = Num(c.estimate)
	e.Test.Meaning = c.endogSentence(e)
	c.dg.Endogeneity = e
	return nil
}

// tStatDF returns t and its two-sided p-value with df degrees of freedom
// (normal when df <= 0).
func (c *ctx) tStatDF(b, se float64, df int) (t, p float64) {
	t = b / se
	return t, ivcore.FSurvival(t*t, 1, df)
}

func (c *ctx) endogSentence(e *Endogeneity) string {
	p := float64(e.Test.P)
	what := strings.Join(c.endogNames, " and ")
	lead := ""
	if len(e.Residuals) == 1 {
		r := e.Residuals[0]
		lead = fmt.Sprintf("The first-stage residual enters the equation with coefficient %s (t = %s, %s)", fmtG(float64(r.Estimate)), fmtG(float64(r.T)), fmtP(p))
	} else {
		lead = fmt.Sprintf("The first-stage residuals enter the equation jointly with F = %s (%s)", fmtG(float64(e.Test.Value)), fmtP(p))
	}
	cmp := fmt.Sprintf(" (OLS %s, %s %s)", fmtG(float64(e.OLS)), c.dg.Estimator, fmtG(float64(e.IV)))
	if p < c.alpha() {
		return lead + fmt.Sprintf(": %s responds to the unobserved demand shocks, so OLS is biased%s and instrumenting is needed.", what, cmp)
	}
	return lead + fmt.Sprintf(": the data do not show that %s is endogenous; OLS and IV do not differ significantly%s. IV stays the safe choice when prices are set with demand in view; OLS would be more precise if %s is truly exogenous.", what, cmp, what)
}
