package ivcore

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// Critical returns the two-sided critical value for a confidence level
// (for example 0.95) with df degrees of freedom: the (1+level)/2 quantile
// of Student's t, or of the standard normal when df <= 0.
func Critical(level float64, df int) float64 {
	if !(level > 0 && level < 1) {
		panic("ivcore: confidence level outside (0, 1)")
	}
	p := (1 + level) / 2
	if df <= 0 {
		return distuv.UnitNormal.Quantile(p)
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(p)
}

// ConfInt returns the Wald band b_j ± t·se_j at the given level, with t
// from Student's t with the covariance's degrees of freedom.
func (f *Fit) ConfInt(j int, level float64) (lo, hi float64) {
	c := Critical(level, f.Vcov.DF) * f.SE(j)
	return f.Coef[j] - c, f.Coef[j] + c
}

// PValue returns the two-sided p-value of b_j = 0.
func (f *Fit) PValue(j int) float64 {
	t := f.Coef[j] / f.SE(j)
	if f.Vcov.DF <= 0 {
		return 2 * distuv.UnitNormal.Survival(math.Abs(t))
	}
	return 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(f.Vcov.DF)}.Survival(math.Abs(t))
}

// WaldTest is a joint test of linear restrictions.
type WaldTest struct {
	// Chi2 is the Wald statistic; F = Chi2/Q.
	Chi2, F float64
	// Q is the number of restrictions; DF the denominator degrees of
	// freedom of F.
	Q, DF int
	// P is the p-value from F(Q, DF).
	P float64
}

// Wald tests R b = q for the coefficients b with covariance cov:
//
//	W = (Rb - q)ᵀ (R V Rᵀ)⁻¹ (Rb - q),   F = W/Q ~ F(Q, df)
//
// R is Q×p and q has length Q (nil means zeros).
func Wald(b []float64, cov mat.Symmetric, r *mat.Dense, q []float64, df int) (WaldTest, error) {
	nq, p := r.Dims()
	if p != len(b) || cov.SymmetricDim() != p {
		panic("ivcore: Wald dimensions mismatch")
	}
	d := mat.NewVecDense(nq, nil)
	d.MulVec(r, mat.NewVecDense(p, append([]float64(nil), b...)))
	if q != nil {
		d.SubVec(d, mat.NewVecDense(nq, append([]float64(nil), q...)))
	}
	var t, rvr mat.Dense
	t.Mul(r, cov)
	rvr.Mul(&t, r.T())
	var ch mat.Cholesky
	if !ch.Factorize(symmetrize(&rvr)) {
		return WaldTest{}, fmt.Errorf("ivcore: Wald test: the covariance of the restrictions is singular")
	}
	x := mat.NewVecDense(nq, nil)
	if err := ch.SolveVecTo(x, d); err != nil {
		return WaldTest{}, fmt.Errorf("ivcore: Wald test: %v", err)
	}
	w := mat.Dot(d, x)
	wt := WaldTest{Chi2: w, F: w / float64(nq), Q: nq, DF: df}
	wt.P = FSurvival(wt.F, nq, df)
	return wt, nil
}

// FSurvival returns P(F > f) for F(d1, d2); with d2 <= 0 it uses the
// chi-square limit χ²(d1)/d1.
func FSurvival(f float64, d1, d2 int) float64 {
	if d2 <= 0 {
		return distuv.ChiSquared{K: float64(d1)}.Survival(f * float64(d1))
	}
	return distuv.F{D1: float64(d1), D2: float64(d2)}.Survival(f)
}

// ChiSquaredSurvival returns P(χ²(k) > x).
func ChiSquaredSurvival(x float64, k int) float64 {
	return distuv.ChiSquared{K: float64(k)}.Survival(x)
}

// Select returns the Q×p matrix picking coefficients idx out of p.
func Select(idx []int, p int) *mat.Dense {
	r := mat.NewDense(len(idx), p, nil)
	for i, j := range idx {
		r.Set(i, j, 1)
	}
	return r
}
