package ivcore

import (
	"errors"
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// GMM labels fits from TwoStepGMM. Estimate does not compute it; call
// TwoStepGMM.
const GMM Estimator = Fuller + 1

// GMMResult is a two-step efficient GMM fit with Hansen's
// over-identification test.
type GMMResult struct {
	// Fit holds the second-step estimates. Estimator is GMM, Kappa is 1
	// (with an iid weight the estimator is 2SLS), Pi() is the first-stage
	// matrix, Bread() is (XᵀZ S⁻¹ ZᵀX)⁻¹ and Residual() the second-step
	// residual. Cov is (XᵀZ Ŝ_c⁻¹ ZᵀX)⁻¹, where Ŝ_c is S with the
	// small-sample factors of the covariance kind (Moments.Meat; for iid,
	// σ̂² ZᵀZ with σ̂² = SSR/(n-k) of the first step).
	Fit *Fit
	// S is the estimated covariance of the moment conditions Zᵀe at the
	// first-step (2SLS) residual, as a sum over units without small-sample
	// factors (see MomentCov), |Z|×|Z| in the order of Model.Z(). Its
	// inverse is the weight matrix of the second step.
	S *mat.SymDense
	// J is Hansen's statistic at the second-step estimate, DF = |Z| - |X|
	// its degrees of freedom and P its χ²(DF) p-value. A just-identified
	// model has DF = 0, J = 0 and P = 1: there is nothing to test.
	J  float64
	DF int
	P  float64
}

// MomentCov returns the covariance of the moment conditions Zᵀe for the
// residual e = A r and instrument columns z, as a sum over units without
// small-sample factors:
//
//	IID:      S = (eᵀe/n) ZᵀZ
//	HC1:      S = Σ_i (z_i e_i)(z_i e_i)ᵀ           (one pass over the rows)
//	cluster:  S = Σ_g (Z_gᵀe_g)(Z_gᵀe_g)ᵀ           (from the cluster blocks)
//	two-way:  S = S_a + S_b - S_ab, negative eigenvalues set to zero
//
// This is the S of Hansen's J (Hansen 1982, Econometrica 50(4),
// 1029-1054; Hayashi, Econometrics, 2000, section 3.5, ISBN
// 9780691010182).
func (m *Moments) MomentCov(z []int, r []float64, vk VcovKind) (*mat.SymDense, error) {
	switch vk {
	case IID:
		s := m.subSym(z)
		s.ScaleSym(m.quad(r)/float64(m.N), s)
		return s, nil
	case HC1:
		return m.ScoreCov(z, [][]float64{r}, -1)
	case Cluster:
		if len(m.Clusters) == 0 {
			return nil, fmt.Errorf("cluster-robust weight asked for, but no cluster column was given: set --cluster")
		}
		if len(m.Clusters) != 1 && len(m.Clusters) != 3 {
			panic("ivcore: clusters must be one dimension, or two and their intersection")
		}
		var total *mat.SymDense
		for d := range m.Clusters {
			s, err := m.ScoreCov(z, [][]float64{r}, d)
			if err != nil {
				return nil, err
			}
			if d == 2 {
				s.ScaleSym(-1, s)
			}
			if total == nil {
				total = s
			} else {
				total.AddSym(total, s)
			}
		}
		if len(m.Clusters) == 3 {
			total, _ = clipNegative(total)
		}
		return total, nil
	}
	panic("ivcore: unknown covariance kind")
}

// HansenJ returns the GMM estimate of md that weights the moment
// conditions Zᵀe (Z = md.Z()) by S⁻¹, and the minimised criterion:
//
//	b = (XᵀZ S⁻¹ ZᵀX)⁻¹ XᵀZ S⁻¹ Zᵀy
//	J = ḡᵀ S⁻¹ ḡ,   ḡ = Zᵀ(y - X b)
//
// S is |Z|×|Z| in the order of md.Z(), scaled as a sum over units (as
// MomentCov returns it; then J has the usual χ² scale). With S from a
// larger model restricted to these instruments, J is the restricted
// criterion of the difference-in-J (C) statistic. It returns an error
// when S or the weighted normal equations are singular. HansenJ panics if S
// is not |Z|×|Z|.
func HansenJ(m *Moments, md Model, s mat.Symmetric) (j float64, coef []float64, err error) {
	j, coef, _, _, err = gmmSolve(m, md, s)
	return j, coef, err
}

// gmmSolve computes the GMM estimate with weight S⁻¹: J, the coefficients,
// (XᵀZ S⁻¹ ZᵀX)⁻¹ and the residual combination.
func gmmSolve(m *Moments, md Model, s mat.Symmetric) (j float64, coef []float64, hinv *mat.SymDense, resid []float64, err error) {
	xi, zi := md.X(), md.Z()
	if s.SymmetricDim() != len(zi) {
		panic("ivcore: GMM weight dimension differs from the instrument count")
	}
	cs, ok := newScaledChol(s)
	if !ok {
		return 0, nil, nil, nil, fmt.Errorf("%w: the covariance of the moment conditions is singular (with clustered errors this happens when there are fewer clusters than instruments)", ErrCollinear)
	}
	szx := m.sub(zi, xi)
	szy := m.sub(zi, []int{md.Y})
	wzx := cs.solve(szx) // S⁻¹ ZᵀX
	var h, g mat.Dense
	h.Mul(szx.T(), wzx)
	g.Mul(wzx.T(), szy)
	ch, ok := newScaledChol(symmetrize(&h))
	if !ok {
		return 0, nil, nil, nil, fmt.Errorf("%w: the GMM normal equations are not positive definite", ErrCollinear)
	}
	b := ch.solve(&g)
	coef = make([]float64, len(xi))
	resid = make([]float64, len(m.Names))
	resid[md.Y] = 1
	for i, c := range xi {
		coef[i] = b.At(i, 0)
		resid[c] -= coef[i]
	}
	gbar := mat.NewDense(len(zi), 1, nil)
	for a, c := range zi {
		v := 0.0
		for l, rl := range resid {
			if rl != 0 {
				v += m.Gram.At(c, l) * rl
			}
		}
		gbar.Set(a, 0, v)
	}
	wg := cs.solve(gbar)
	for a := range zi {
		j += gbar.At(a, 0) * wg.At(a, 0)
	}
	return max(j, 0), coef, ch.inverse(), resid, nil
}

// TwoStepGMM fits md by two-step efficient GMM:
//
//	step 1: b₁ = 2SLS,  ê₁ = y - X b₁,  S = MomentCov(Z, ê₁, vk)
//	step 2: b  = (XᵀZ S⁻¹ ZᵀX)⁻¹ XᵀZ S⁻¹ Zᵀy
//	J = ḡᵀ S⁻¹ ḡ,  ḡ = Zᵀ(y - X b),  J ~ χ²(|Z| - |X|) under valid instruments
//
// Everything comes from the moment blocks: HC1 needs one pass over the
// rows (for S), cluster kinds use the per-cluster blocks. With vk = IID,
// S ∝ ZᵀZ, b equals 2SLS and J equals Sargan's n·R² statistic. See
// Hansen (1982), Econometrica 50(4), 1029-1054, and Hayashi, Econometrics
// (2000), sections 3.5-3.6, ISBN 9780691010182.
func TwoStepGMM(m *Moments, md Model, vk VcovKind) (*GMMResult, error) {
	first, err := Estimate(m, md, TSLS, IID)
	if err != nil {
		return nil, err
	}
	xi, zi := md.X(), md.Z()
	K := first.K
	var s, sc *mat.SymDense
	var info VcovInfo
	switch vk {
	case IID:
		_, info, _ = m.Meat(zi, [][]float64{first.resid}, IID, K)
		s, _ = m.MomentCov(zi, first.resid, IID)
		sc = m.subSym(zi)
		sc.ScaleSym(first.Sigma2, sc)
	case HC1:
		sc, info, err = m.Meat(zi, [][]float64{first.resid}, HC1, K)
		if err != nil {
			return nil, err
		}
		s = mat.NewSymDense(len(zi), nil)
		s.ScaleSym(float64(m.N-K)/float64(m.N), sc)
	case Cluster:
		sc, info, err = m.Meat(zi, [][]float64{first.resid}, Cluster, K)
		if err != nil {
			return nil, err
		}
		if len(m.Clusters) == 3 {
			// Two-way: the sum of terms can be indefinite (Cameron,
			// Gelbach & Miller 2011, section 2.3).
			sc, info.Clipped = clipNegative(sc)
		}
		if s, err = m.MomentCov(zi, first.resid, Cluster); err != nil {
			return nil, err
		}
	default:
		panic("ivcore: unknown covariance kind")
	}
	j, coef, hinv, resid, err := gmmSolve(m, md, s)
	if err != nil {
		return nil, err
	}
	f := &Fit{Estimator: GMM, Model: md, Names: m.names(xi), Coef: coef, Kappa: 1,
		N: m.N, K: K, m: m, pi: first.pi, bread: hinv, resid: resid}
	f.SSR = m.quad(resid)
	f.Sigma2 = f.SSR / float64(m.N-K)

	// Covariance with the small-sample factors of the kind.
	cc, ok := newScaledChol(sc)
	if !ok {
		return nil, errors.New("ivcore: GMM covariance: the moment covariance is singular")
	}
	szx := m.sub(zi, xi)
	var h mat.Dense
	h.Mul(szx.T(), cc.solve(szx))
	ch, ok := newScaledChol(symmetrize(&h))
	if !ok {
		return nil, fmt.Errorf("%w: the GMM covariance is not positive definite", ErrCollinear)
	}
	f.Cov = ch.inverse()
	if vk == Cluster && len(m.Clusters) == 3 {
		f.Cov, info.Clipped = clipNegative(f.Cov)
	}
	info.Label = "efficient two-step GMM, weight " + info.Label + " at the 2SLS residual"
	f.Vcov = info

	res := &GMMResult{Fit: f, S: s, J: j, DF: len(zi) - len(xi)}
	res.P = 1
	if res.DF > 0 {
		res.P = ChiSquaredSurvival(j, res.DF)
	} else {
		res.J = 0
	}
	return res, nil
}
