package supplyshifters

import (
	"fmt"
	"math"

	"priceiv/ivcore"
)

// FirstStageDetail is the first stage of one endogenous regressor: the
// regressor on all instruments (controls and shifters), with the model's
// covariance kind.
type FirstStageDetail struct {
	Endogenous string `json:"endogenous"`
	// Shifters holds each shifter's coefficient and sign check.
	Shifters []ShifterEffect `json:"shifters"`
	// F is the Wald F of all shifters (robust or cluster-robust when the
	// model's covariance is).
	F Stat `json:"f"`
	// PartialR2 is the share of the regressor's variation left after the
	// controls and fixed effects that the shifters explain:
	// 1 - SSR(all instruments)/SSR(controls only).
	PartialR2        Num    `json:"partial_r2"`
	PartialR2Meaning string `json:"partial_r2_meaning"`
	// SheaPartialR2 (several endogenous regressors only) is Shea's (1997)
	// partial R²: the shifters' explanatory power for this regressor net
	// of what they predict for the others,
	//
	//	R²_j = [(XᵀX)⁻¹]_jj / [(XᵀP_Z X)⁻¹]_jj
	//
	// (Godfrey 1999, Review of Economics and Statistics 81(3), 550-552).
	SheaPartialR2 *Num   `json:"shea_partial_r2,omitempty"`
	SheaMeaning   string `json:"shea_meaning,omitempty"`
	// ConditionalF (several endogenous regressors only) is the
	// Sanderson-Windmeijer conditional F: the strength of the shifters for
	// this regressor given the others,
	//
	//	F_j|−j = W(ε̂_j on Z) / (L - p + 1)
	//
	// where ε̂_j is the residual of the 2SLS regression of x_j on the
	// other endogenous regressors and the controls (Sanderson & Windmeijer
	// 2016, Journal of Econometrics 190(2), 212-221).
	ConditionalF *Stat `json:"sanderson_windmeijer_f,omitempty"`
}

// ShifterEffect is one shifter's first-stage coefficient.
type ShifterEffect struct {
	Coef
	// PartialR2 is this shifter's own contribution: the share of the
	// regressor's variation left after the controls and the other
	// shifters that it explains.
	PartialR2 Num `json:"partial_r2"`
	// ExpectedSign is +1 (should raise the regressor), -1 or 0 (none).
	ExpectedSign int `json:"expected_sign"`
	// SignCheck is "as expected", "wrong sign" or "not checked".
	SignCheck string `json:"sign_check"`
	Meaning   string `json:"meaning"`
}

// Sign check results.
const (
	SignAsExpected = "as expected"
	SignWrong      = "wrong sign"
	SignNotChecked = "not checked"
)

// expectedSign returns the sign declared for a shifter in the first stage
// of an endogenous regressor (default +1).
func (c *ctx) expectedSign(shifter, endog string) int {
	if s, ok := c.opts.ExpectSign[shifter+"@"+endog]; ok {
		return s
	}
	if s, ok := c.opts.ExpectSign[shifter]; ok {
		return s
	}
	return 1
}

// swResidual returns the residual combination of the 2SLS regression of
// endogenous regressor j on the other endogenous regressors and the
// controls, instrumented by the shifters (Sanderson & Windmeijer 2016,
// section 3).
func (c *ctx) swResidual(j int) ([]float64, error) {
	var others []int
	for k, e := range c.md.Endog {
		if k != j {
			others = append(others, e)
		}
	}
	md := ivcore.Model{Y: c.md.Endog[j], Endog: others, Exog: c.md.Exog, Instr: c.md.Instr}
	f, err := ivcore.Estimate(c.m, md, ivcore.TSLS, ivcore.IID)
	if err != nil {
		return nil, fmt.Errorf("supplyshifters: conditional first stage of %q: %w", c.endogNames[j], err)
	}
	return f.Residual(), nil
}

// firstStages fills Diagnostics.FirstStage. Coefficients are Π = (ZᵀZ)⁻¹ZᵀX
// from the Gram matrix and their covariance B M B from the score bank.
func (c *ctx) firstStages() {
	maxT := make([]float64, c.nl)  // largest |t| of each shifter over the first stages
	ownR2 := make([]float64, c.nl) // its largest own partial R²
	var shea []float64
	if c.p > 1 {
		shea = c.sheaR2()
	}
	for j, e := range c.md.Endog {
		endog := c.endogNames[j]
		pe := c.excluded(c.piZ[j])
		v := symOf(c.exclCov(c.bV+j, c.bV+j, false))
		ssr := c.m.Cross(c.vres[j], c.vres[j])
		fd := FirstStageDetail{Endogenous: endog}
		for a, name := range c.shifterNames {
			se := math.Sqrt(v.At(a, a))
			t, p := c.tStat(pe[a], se)
			se2 := ShifterEffect{Coef: Coef{Name: name, Estimate: Num(pe[a]), StdError: Num(se), T: Num(t), P: Num(p)}}
			// Own partial R²: drop this shifter from the instruments.
			var rest []int
			for b, col := range c.z {
				if b != c.exIdx[a] {
					rest = append(rest, col)
				}
			}
			se2.PartialR2 = Num(math.NaN())
			if _, _, r, err := c.m.Regress(c.m.Unit(e), rest); err == nil {
				if s0 := c.m.Cross(r, r); s0 > 0 {
					se2.PartialR2 = Num(1 - ssr/s0)
				}
			}
			maxT[a] = math.Max(maxT[a], math.Abs(t))
			if float64(se2.PartialR2) > ownR2[a] {
				ownR2[a] = float64(se2.PartialR2)
			}
			se2.ExpectedSign = c.expectedSign(name, endog)
			se2.SignCheck, se2.Meaning = c.signSentence(name, endog, pe[a], t, se2.ExpectedSign)
			fd.Shifters = append(fd.Shifters, se2)
		}
		f, p := c.waldF(pe, v, c.nl)
		fd.F = Stat{Name: "first-stage Wald F", Value: Num(f), Dist: c.fDist(c.nl), DF1: c.nl, DF2: c.bank.info.DF, P: Num(p)}
		fd.F.Meaning = c.firstFSentence(endog, f, p)
		fd.PartialR2 = Num(math.NaN())
		if _, _, r, err := c.m.Regress(c.m.Unit(e), c.md.Exog); err == nil {
			if s0 := c.m.Cross(r, r); s0 > 0 {
				fd.PartialR2 = Num(1 - ssr/s0)
			}
		}
		fd.PartialR2Meaning = fmt.Sprintf("The shifters explain %s of the variation in %s that is left after the controls and fixed effects.", pctNum(fd.PartialR2), endog)
		if c.p > 1 {
			s := Num(shea[j])
			fd.SheaPartialR2 = &s
			fd.SheaMeaning = c.sheaSentence(endog, shea[j], float64(fd.PartialR2))
			fd.ConditionalF = c.conditionalF(j)
		}
		c.dg.FirstStage = append(c.dg.FirstStage, fd)
	}
	if c.nl > 1 {
		for a, name := range c.shifterNames {
			if maxT[a] < c.crit {
				c.warn("Shifter %s adds nothing detectable to the first stage beyond the other shifters (largest |t| = %s, own partial R² %s): a shifter this weak adds bias toward OLS without adding information; consider dropping it.", name, fmtG(maxT[a]), fmtG(ownR2[a]))
			}
		}
	}
}

func pctNum(x Num) string {
	if !x.Finite() {
		return "an undefined share"
	}
	return pct(float64(x))
}

// signSentence checks a shifter's sign and says what it means.
func (c *ctx) signSentence(name, endog string, b, t float64, want int) (check, meaning string) {
	dir := "raises"
	if b < 0 {
		dir = "lowers"
	}
	strength, tnote := "clearly", fmt.Sprintf("t = %s", fmtG(t))
	if math.Abs(t) < c.crit {
		strength = "but not significantly"
		tnote += fmt.Sprintf(", |t| below %s", fmtG(c.crit))
	}
	switch {
	case want == 0:
		return SignNotChecked, fmt.Sprintf("%s %s %s %s (%s); no sign was expected.", name, dir, endog, strength, tnote)
	case b == 0 || (b > 0) == (want > 0):
		return SignAsExpected, fmt.Sprintf("%s %s %s %s (%s), as a cost shifter %s should.", name, dir, endog, strength, tnote, map[bool]string{true: "that raises it", false: "declared to lower it"}[want > 0])
	}
	wantDir := "raise"
	flag := "-"
	if want < 0 {
		wantDir = "lower"
		flag = "+"
	}
	c.warn("Shifter %s %s %s in the first stage (coefficient %s, t = %s), but it is expected to %s it: check the data and the economics; if it really moves %s the other way, declare it (%s=%s).",
		name, dir, endog, fmtG(b), fmtG(t), wantDir, endog, name, flag)
	m := fmt.Sprintf("WRONG SIGN: %s %s %s %s (%s) although it is expected to %s it; a shifter that moves price the wrong way suggests a data error or a shifter that also stands for demand.", name, dir, endog, strength, tnote, wantDir)
	return SignWrong, m
}

// firstFSentence reads the first-stage F.
func (c *ctx) firstFSentence(endog string, f, p float64) string {
	kind := "robust"
	if c.vk == ivcore.IID {
		kind = "homoskedastic"
	} else if c.vk == ivcore.Cluster {
		kind = "cluster-robust"
	}
	if f >= 10 {
		return fmt.Sprintf("Taken together the shifters move %s clearly (%s F = %s, %s). Above 10, the usual rule of thumb: 2SLS is not pulled far toward OLS by weak shifters.", endog, kind, fmtG(f), fmtP(p))
	}
	c.warn("The shifters move %s only weakly (first-stage F = %s < 10): 2SLS leans toward OLS and its Wald band is too narrow; read the Anderson-Rubin band.", endog, fmtG(f))
	return fmt.Sprintf("The shifters move %s only weakly (%s F = %s, %s). Below 10, the usual rule of thumb: 2SLS is biased toward OLS and its Wald band is too narrow; rely on the Anderson-Rubin band.", endog, kind, fmtG(f), fmtP(p))
}

// sheaR2 returns Shea's partial R² for each endogenous regressor.
func (c *ctx) sheaR2() []float64 {
	out := make([]float64, c.p)
	for j := range out {
		out[j] = math.NaN()
	}
	x := c.md.X()
	xxInv, ok := scaledInverse(subSym(c.m.Gram, x))
	if !ok {
		return out
	}
	bread := c.tsls.Bread() // (XᵀP_Z X)⁻¹, X = endogenous then exogenous
	for j := range out {
		out[j] = xxInv.At(j, j) / bread.At(j, j)
	}
	return out
}

func (c *ctx) sheaSentence(endog string, shea, partial float64) string {
	s := fmt.Sprintf("Shea partial R² %s: the shifters' power to move %s apart from the other endogenous regressors.", fmtG(shea), endog)
	if shea < 0.5*partial {
		s += " It is well below the plain partial R², so the shifters move the endogenous regressors together and separate them poorly."
	}
	return s
}

// conditionalF returns the Sanderson-Windmeijer conditional F of
// endogenous regressor j: the Wald statistic of the shifters in the
// regression of ε̂_j (the residual of x_j on the other endogenous
// regressors and controls by 2SLS) on all instruments, divided by
// L - p + 1 instead of L because p - 1 coefficients were estimated:
//
//	F_j|−j = W(ε̂_j on Z) / (L - p + 1)
//
// with the model's covariance kind (homoskedastic in the source).
// Sanderson & Windmeijer (2016), "A weak instrument F-test in linear IV
// models with multiple endogenous variables", Journal of Econometrics
// 190(2), 212-221, equation (16).
func (c *ctx) conditionalF(j int) *Stat {
	ge := c.excluded(c.swCoef[j])
	q := c.nl - c.p + 1
	v := symOf(c.exclCov(c.bSW[j], c.bSW[j], false))
	w := quadInv(v, ge)
	f := w / float64(q)
	p := ivcore.FSurvival(f, q, c.bank.info.DF)
	endog := c.endogNames[j]
	st := &Stat{Name: "Sanderson-Windmeijer conditional F", Value: Num(f), Dist: c.fDist(q), DF1: q, DF2: c.bank.info.DF, P: Num(p)}
	if f >= 10 {
		st.Meaning = fmt.Sprintf("Given the other endogenous regressors, the shifters still move %s clearly (conditional F = %s): its coefficient is not weakly identified.", endog, fmtG(f))
	} else {
		st.Meaning = fmt.Sprintf("Given the other endogenous regressors, the shifters move %s only weakly (conditional F = %s < 10): its coefficient is weakly identified even if each first-stage F looks fine.", endog, fmtG(f))
		c.warn("The coefficient of %s is weakly identified once the other endogenous regressors are accounted for (Sanderson-Windmeijer F = %s).", endog, fmtG(f))
	}
	return st
}
