package ivcore

// FirstStage is the reduced-form regression of one endogenous regressor on
// all instruments (exogenous regressors and excluded instruments).
type FirstStage struct {
	// Endogenous names the regressor.
	Endogenous string
	// Fit is the OLS fit; its coefficients are ordered as Model.Z()
	// (exogenous first, then the excluded instruments).
	Fit *Fit
	// Excluded holds the positions of the excluded instruments in Fit.
	Excluded []int
	// F is the Wald test that all excluded instruments have zero
	// coefficient, with the same kind of covariance as the main model.
	F WaldTest
	// PartialR2 is the share of the regressor's variation, after the
	// exogenous regressors, explained by the excluded instruments.
	PartialR2 float64
}

// FirstStages fits the first stage of every endogenous regressor of md:
//
//	x_j = Z π_j + v_j,   F_j = π̂_eᵀ V̂(π̂_e)⁻¹ π̂_e / L
//
// where π̂_e are the L excluded-instrument coefficients and V̂ is the iid,
// HC1 or cluster-robust covariance (Stock & Watson, Introduction to
// Econometrics, 3rd ed., section 12.3 for the first-stage F; the robust
// form is their recommendation for heteroskedastic data).
func FirstStages(m *Moments, md Model, vk VcovKind) ([]FirstStage, error) {
	var out []FirstStage
	for _, e := range md.Endog {
		fm := Model{Y: e, Exog: md.Z()}
		fit, err := Estimate(m, fm, OLS, vk)
		if err != nil {
			return nil, err
		}
		fs := FirstStage{Endogenous: m.Names[e], Fit: fit}
		for i := range md.Instr {
			fs.Excluded = append(fs.Excluded, len(md.Exog)+i)
		}
		fs.F, err = Wald(fit.Coef, fit.Cov, Select(fs.Excluded, len(fit.Coef)), nil, fit.Vcov.DF)
		if err != nil {
			return nil, err
		}
		// Partial R²: 1 - SSR(full)/SSR(exogenous only).
		restricted := m.quad(projResidual(m, e, md.Exog))
		if restricted > 0 {
			fs.PartialR2 = 1 - fit.SSR/restricted
		}
		out = append(out, fs)
	}
	return out, nil
}

// projResidual returns the combination r with A r = the residual of column
// y regressed on columns v (y itself when v is empty).
func projResidual(m *Moments, y int, v []int) []float64 {
	r := make([]float64, len(m.Names))
	r[y] = 1
	if len(v) == 0 {
		return r
	}
	cv, ok := newScaledChol(m.subSym(v))
	if !ok {
		return r
	}
	b := cv.solve(m.sub(v, []int{y}))
	for i, c := range v {
		r[c] -= b.At(i, 0)
	}
	return r
}
