package supplyshifters

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// ConservativeMOP is the Montiel Olea-Pflueger critical value for the
// effective F that holds whatever the error structure: 5% level, 10%
// worst-case relative bias (Montiel Olea & Pflueger 2013, JBES 31(3),
// Table 1, K_eff = 1).
const ConservativeMOP = 23.109

// WeakIV gathers the weak-instrument statistics.
type WeakIV struct {
	// CraggDonald is the Cragg-Donald Wald F (minimum-eigenvalue form),
	// which assumes iid errors:
	//
	//	CD = mineig( Σ̂_VV^{-1/2} X̃ᵀP_Z̃X̃ Σ̂_VV^{-1/2} ) / L
	//
	// with X̃, Z̃ the endogenous regressors and shifters net of the
	// controls, Σ̂_VV = V̂ᵀV̂/(n - k) from the first-stage residuals
	// (Cragg & Donald 1993, Econometric Theory 9(2), 222-240; Stock &
	// Yogo 2005, section 2). With one endogenous regressor it is the
	// homoskedastic first-stage F.
	CraggDonald Stat `json:"cragg_donald_f"`
	// StockYogo lists the Stock & Yogo (2005) critical values for the
	// model's numbers of endogenous regressors and shifters and the
	// estimator, each with whether Cragg-Donald exceeds it.
	StockYogo     []SYCheck `json:"stock_yogo"`
	StockYogoNote string    `json:"stock_yogo_note"`
	// KPWald is the Kleibergen-Paap rk Wald statistic divided by L, with
	// the covariance of vec(Π̂) of the model's kind (first-stage
	// residuals, small-sample factors included) and FᵀF = Σ̂_VV⁻¹: the
	// robust analogue of Cragg-Donald (equal to it under iid errors, and
	// to the robust first-stage F with one endogenous regressor).
	KPWald Stat `json:"kp_rk_wald_f"`
	// KPLM is the Kleibergen-Paap rk LM test of under-identification,
	// H0: rank(Π) = p - 1, χ²(L - p + 1): the rk statistic (rkStat) in
	// its score form, with the covariance of vec(Π̂) estimated from the
	// residuals under Π = 0 (the endogenous regressors net of the
	// controls, X̃) as sums without small-sample factors, and the
	// normalisation FᵀF = (X̃ᵀX̃)⁻¹. Under iid errors it is Anderson's
	// canonical-correlation statistic n·mineig((X̃ᵀX̃)⁻¹X̃ᵀP_Z̃X̃); with one
	// endogenous regressor it is the robust score test of π = 0.
	KPLM Stat `json:"kp_rk_lm"`
	// Effective is the Montiel Olea-Pflueger effective F test (one
	// endogenous regressor only).
	Effective *EffectiveFTest `json:"effective_f"`
}

// SYCheck is one Stock-Yogo critical value and the verdict on it.
type SYCheck struct {
	// Table is "TSLS relative bias", "TSLS size" or "LIML size".
	Table string `json:"table"`
	// Threshold is the tolerated relative bias or size.
	Threshold  float64 `json:"threshold"`
	Critical   float64 `json:"critical_value"`
	Provenance string  `json:"provenance"`
	// Exceeded is true when the Cragg-Donald F exceeds the critical value
	// (weak instruments rejected at 5% for this threshold).
	Exceeded bool `json:"exceeded"`
}

// EffectiveFTest is the Montiel Olea-Pflueger test for one endogenous
// regressor.
type EffectiveFTest struct {
	// F is the effective F (EffectiveF).
	F Num `json:"f_eff"`
	// Critical is the simplified critical value (MOPCritical) for
	// worst-case bias Tau at level Alpha; KEff its effective degrees of
	// freedom.
	Critical Num     `json:"critical_value"`
	KEff     Num     `json:"k_eff"`
	Tau      float64 `json:"tau"`
	Alpha    float64 `json:"alpha"`
	// Conservative is 23.109, valid for any error structure.
	Conservative float64 `json:"conservative_critical_value"`
	// Strong is true when F exceeds Critical.
	Strong  bool   `json:"strong"`
	Meaning string `json:"meaning"`
}

// weakIV fills Diagnostics.WeakIV.
func (c *ctx) weakIV() {
	w := &WeakIV{StockYogo: []SYCheck{}}
	L, p := c.nl, c.p
	pe := mat.NewDense(L, p, nil) // shifter coefficients, L×p
	for j := range c.md.Endog {
		for a, v := range c.excluded(c.piZ[j]) {
			pe.Set(a, j, v)
		}
	}
	// Σ̂_VV from first-stage residuals; X̃ᵀX̃ from the residuals on the
	// controls.
	svv := mat.NewSymDense(p, nil)
	sxx := mat.NewSymDense(p, nil)
	for j := 0; j < p; j++ {
		for k := j; k < p; k++ {
			svv.SetSym(j, k, c.m.Cross(c.vres[j], c.vres[k])/float64(c.m.N-c.kParZ))
			sxx.SetSym(j, k, c.m.Cross(c.bank.res[c.bX[j]], c.bank.res[c.bX[k]]))
		}
	}
	// X̃ᵀP_Z̃X̃ = Πᵀ Z̃ᵀZ̃ Π.
	var t, xpx mat.Dense
	t.Mul(c.zzt, pe)
	xpx.Mul(pe.T(), &t)
	cd, _ := minGeneralEig(symOf(&xpx), svv)
	cd /= float64(L)
	w.CraggDonald = Stat{Name: "Cragg-Donald Wald F", Value: Num(cd), P: Num(math.NaN())}

	// Stock-Yogo cells for the estimator.
	kinds := []SYKind{TSLSBias, TSLSSize}
	if est := c.fit.Estimator; est == ivcore.LIML || est == ivcore.Fuller {
		kinds = []SYKind{LIMLSize}
	}
	for _, k := range kinds {
		for _, cell := range StockYogo(k, p, L) {
			w.StockYogo = append(w.StockYogo, SYCheck{Table: k.String(), Threshold: cell.Threshold, Critical: cell.Value, Provenance: cell.Provenance, Exceeded: cd > cell.Value})
		}
	}
	w.CraggDonald.Meaning, w.StockYogoNote = c.cdSentence(cd, w.StockYogo)

	// Kleibergen-Paap rk Wald: covariance of vec(Π̂) from first-stage
	// residuals, F normalisation from Σ̂_VV.
	vw := c.vecCov(c.bV, false)
	rkw := rkStat(pe, c.zzt, svv, vw)
	w.KPWald = Stat{Name: "Kleibergen-Paap rk Wald F", Value: Num(rkw / float64(L)), P: Num(math.NaN())}
	w.KPWald.Meaning = c.kpWaldSentence(rkw/float64(L), cd)

	// rk LM: residuals under Π = 0 (the regressors net of the controls),
	// sums without small-sample factors, F normalisation from X̃ᵀX̃.
	vl := c.vecCovIdx(c.bX, true)
	rkl := rkStat(pe, c.zzt, sxx, vl)
	df := L - p + 1
	pl := ivcore.ChiSquaredSurvival(rkl, df)
	w.KPLM = Stat{Name: "Kleibergen-Paap rk LM", Value: Num(rkl), Dist: fmt.Sprintf("χ²(%d)", df), DF1: df, P: Num(pl)}
	w.KPLM.Meaning = c.kpLMSentence(rkl, pl)

	if p == 1 {
		w.Effective = c.effectiveF(pe.RawMatrix().Data, vw)
	}
	c.dg.WeakIV = w
}

// vecCov returns the covariance of vec(Π̂) (shifter coefficients stacked
// by endogenous regressor) for the p bank residuals starting at first.
func (c *ctx) vecCov(first int, raw bool) *mat.SymDense {
	idx := make([]int, c.p)
	for j := range idx {
		idx[j] = first + j
	}
	return c.vecCovIdx(idx, raw)
}

func (c *ctx) vecCovIdx(idx []int, raw bool) *mat.SymDense {
	L := c.nl
	out := mat.NewSymDense(len(idx)*L, nil)
	for j, pj := range idx {
		for k := j; k < len(idx); k++ {
			b := c.exclCov(pj, idx[k], raw)
			for a := 0; a < L; a++ {
				for d := 0; d < L; d++ {
					if j == k && d < a {
						continue
					}
					if j == k {
						out.SetSym(j*L+a, k*L+d, (b.At(a, d)+b.At(d, a))/2)
					} else {
						out.SetSym(j*L+a, k*L+d, b.At(a, d))
					}
				}
			}
		}
	}
	return out
}

// rkStat returns the Kleibergen-Paap rk statistic for H0: rank(Π) = p - 1,
// where Π is the L×p matrix of shifter coefficients, zz = Z̃ᵀZ̃, sigma the
// p×p matrix of the F normalisation and v the covariance of vec(Π):
//
//	Θ̂ = G Π̂ Fᵀ,  GᵀG = Z̃ᵀZ̃,  FᵀF = Σ⁻¹,  Θ̂ = U S Vᵀ
//	λ = U_⊥ᵀ Θ̂ v_p,  Ω = (v_pᵀ ⊗ U_⊥ᵀ)(F ⊗ G) V̂ (F ⊗ G)ᵀ(v_p ⊗ U_⊥)
//	rk = λᵀ Ω⁻¹ λ  ~  χ²(L - p + 1)
//
// with U_⊥ the last L - p + 1 left singular vectors and v_p the right
// singular vector of the smallest singular value. Kleibergen & Paap (2006),
// "Generalized reduced rank tests using the singular value decomposition",
// Journal of Econometrics 133(1), 97-126, section 2 with q = p - 1; their
// rotations A_q⊥ = U_⊥R and B_q⊥ = ±v_pᵀ (R orthogonal) leave the
// statistic unchanged, so U_⊥ and v_p are used directly.
func rkStat(pi *mat.Dense, zz, sigma *mat.SymDense, v *mat.SymDense) float64 {
	L, p := pi.Dims()
	var cz, cs mat.Cholesky
	if !cz.Factorize(zz) || !cs.Factorize(sigma) {
		return math.NaN()
	}
	var lz, ls, lsi mat.TriDense
	cz.LTo(&lz)
	cs.LTo(&ls)
	if err := lsi.InverseTri(&ls); err != nil {
		return math.NaN()
	}
	g := mat.DenseCopyOf(lz.T()) // GᵀG = L_z L_zᵀ = Z̃ᵀZ̃
	f := mat.DenseCopyOf(&lsi)   // FᵀF = L_s⁻ᵀ L_s⁻¹ = Σ⁻¹
	var t, theta mat.Dense
	t.Mul(g, pi)
	theta.Mul(&t, f.T())
	var svd mat.SVD
	if !svd.Factorize(&theta, mat.SVDFull) {
		return math.NaN()
	}
	var u, vv mat.Dense
	svd.UTo(&u)
	svd.VTo(&vv)
	q := p - 1
	uperp := u.Slice(0, L, q, L)
	vp := mat.Col(nil, p-1, &vv)
	// λ = U_⊥ᵀ Θ v_p.
	var tv mat.VecDense
	tv.MulVec(&theta, mat.NewVecDense(p, vp))
	var lam mat.VecDense
	lam.MulVec(uperp.T(), &tv)
	// a = Fᵀ v_p, C = Gᵀ U_⊥; Ω = Σ_jk a_j a_k Cᵀ V_jk C.
	var a mat.VecDense
	a.MulVec(f.T(), mat.NewVecDense(p, vp))
	var cm mat.Dense
	cm.Mul(g.T(), uperp)
	r := L - q
	omega := mat.NewDense(r, r, nil)
	for j := 0; j < p; j++ {
		for k := 0; k < p; k++ {
			w := a.AtVec(j) * a.AtVec(k)
			if w == 0 {
				continue
			}
			vjk := mat.NewDense(L, L, nil)
			for x := 0; x < L; x++ {
				for y := 0; y < L; y++ {
					vjk.Set(x, y, v.At(j*L+x, k*L+y))
				}
			}
			var t1, t2 mat.Dense
			t1.Mul(cm.T(), vjk)
			t2.Mul(&t1, &cm)
			t2.Scale(w, &t2)
			omega.Add(omega, &t2)
		}
	}
	return quadInv(symOf(omega), mat.Col(nil, 0, &lam))
}

// effectiveF computes the Montiel Olea-Pflueger test with the covariance
// of the shifter coefficients v (the model's kind).
func (c *ctx) effectiveF(pi []float64, v *mat.SymDense) *EffectiveFTest {
	const alpha, tau = 0.05, 0.10
	e := &EffectiveFTest{Tau: tau, Alpha: alpha, Conservative: ConservativeMOP}
	f := EffectiveF(pi, c.zzt, v, c.m.N)
	var s mat.Dense
	s.Mul(v, c.zzt)
	crit, keff := MOPCritical(alpha, tau, &s)
	e.F, e.Critical, e.KEff = Num(f), Num(crit), Num(keff)
	e.Strong = f > crit
	endog := c.endogNames[0]
	switch {
	case math.IsNaN(f) || math.IsNaN(crit):
		e.Meaning = "The effective F is undefined for these data (the covariance of the first-stage coefficients is degenerate)."
	case f > ConservativeMOP:
		e.Meaning = fmt.Sprintf("Effective F = %s exceeds even the conservative 23.109 (and the data-based critical value %s): at the 5%% level the worst-case 2SLS bias is below 10%% of the benchmark, whatever the error structure. The shifters are strong enough for the usual band on %s.", fmtG(f), fmtG(crit), endog)
	case e.Strong:
		e.Meaning = fmt.Sprintf("Effective F = %s exceeds the critical value %s (10%% worst-case bias, 5%% level, K_eff = %s) but not the conservative 23.109: strong enough by the simplified test; read the Anderson-Rubin band as a check.", fmtG(f), fmtG(crit), fmtG(keff))
	default:
		e.Meaning = fmt.Sprintf("Effective F = %s is below the critical value %s (10%% worst-case bias, 5%% level): the shifters are weak for %s once heteroskedasticity or clustering is allowed for. 2SLS may be badly biased toward OLS; rely on the Anderson-Rubin band.", fmtG(f), fmtG(crit), endog)
		c.warn("Weak shifters: the effective F of %s is %s, below its critical value %s (Montiel Olea-Pflueger, 10%% worst-case bias at 5%%). The 2SLS estimate and its Wald band are not reliable; use the Anderson-Rubin band.", endog, fmtG(f), fmtG(crit))
	}
	return e
}

// cdSentence reads Cragg-Donald against the Stock-Yogo cells.
func (c *ctx) cdSentence(cd float64, cells []SYCheck) (meaning, note string) {
	robust := ""
	if c.vk != ivcore.IID {
		robust = " These critical values assume iid errors; with robust or clustered errors read the effective F (one endogenous regressor) or the Kleibergen-Paap F instead."
	}
	if len(cells) == 0 {
		note = fmt.Sprintf("Stock & Yogo (2005) tabulate no critical values for %d endogenous regressor(s) and %d shifter(s) in this table file (the bias table starts at two more shifters than endogenous regressors).", c.p, c.nl)
		return fmt.Sprintf("Cragg-Donald F = %s (iid errors); no Stock-Yogo critical value is available for this model.%s", fmtG(cd), robust), note
	}
	var best []string
	var worst []string
	byTable := map[string][]SYCheck{}
	var order []string
	for _, s := range cells {
		if _, ok := byTable[s.Table]; !ok {
			order = append(order, s.Table)
		}
		byTable[s.Table] = append(byTable[s.Table], s)
	}
	for _, tab := range order {
		list := byTable[tab] // increasing threshold
		passed := -1
		for i, s := range list {
			if s.Exceeded {
				passed = i
				break
			}
		}
		what := "size of a nominal 5% Wald test"
		if strings.Contains(tab, "bias") {
			what = "2SLS bias relative to OLS"
		}
		if passed < 0 {
			worst = append(worst, fmt.Sprintf("below every %s critical value (the %s may exceed %s; %s needed for %s)", tab, what, pct(list[len(list)-1].Threshold), fmtG(list[len(list)-1].Critical), pct(list[len(list)-1].Threshold)))
		} else {
			best = append(best, fmt.Sprintf("above the %s critical value %s for %s (the %s is at most %s)", tab, fmtG(list[passed].Critical), pct(list[passed].Threshold), what, pct(list[passed].Threshold)))
		}
	}
	meaning = fmt.Sprintf("Cragg-Donald F = %s: %s.%s", fmtG(cd), strings.Join(append(best, worst...), "; "), robust)
	note = "Critical values: Stock & Yogo (2005), 5% level; see the provenance of each cell."
	if len(best) == 0 && c.vk == ivcore.IID {
		c.warn("Weak shifters by Stock-Yogo: the Cragg-Donald F (%s) is below every tabulated critical value.", fmtG(cd))
	}
	return meaning, note
}

func (c *ctx) kpWaldSentence(f, cd float64) string {
	if c.vk == ivcore.IID {
		return fmt.Sprintf("Kleibergen-Paap rk Wald F = %s; under iid errors it equals the Cragg-Donald F.", fmtG(f))
	}
	return fmt.Sprintf("Kleibergen-Paap rk Wald F = %s: the Cragg-Donald F made robust to the error structure (Cragg-Donald: %s). Comparing it with the Stock-Yogo values is a rule of thumb only.", fmtG(f), fmtG(cd))
}

func (c *ctx) kpLMSentence(lm, p float64) string {
	what := "the endogenous regressor"
	if c.p > 1 {
		what = "all endogenous regressors"
	}
	if p < c.alpha() {
		return fmt.Sprintf("rk LM = %s (%s) rejects under-identification: the shifters move %s in a way that identifies the coefficients.", fmtG(lm), fmtP(p), what)
	}
	c.warn("The model may be under-identified: the Kleibergen-Paap rk LM test (%s) cannot reject that the shifters fail to identify %s. The estimate carries little or no information.", fmtP(p), what)
	return fmt.Sprintf("rk LM = %s (%s) cannot reject under-identification: the shifters may not identify %s at all, and then the estimate carries no information about it.", fmtG(lm), fmtP(p), what)
}
