package supplyshifters

import (
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/mathext"
)

// EffectiveF returns the effective first-stage F statistic of Montiel Olea
// and Pflueger for one endogenous regressor, robust to heteroskedasticity,
// clustering and serial correlation through the supplied covariance vpi.
//
//	Σ_ππ  = n · V̂ar(π̂)
//	F_eff = n · π̂ᵀ Q_ZZ π̂ / tr(Σ_ππ Q_ZZ)
//	      = π̂ᵀ Q_ZZ π̂ / tr(V̂ar(π̂) Q_ZZ)
//
// pi holds the first-stage coefficients π̂ of the K excluded instruments after
// the exogenous regressors (and absorbed fixed effects) have been partialled
// out; qzz is Q_ZZ = ZᵀZ/n of those partialled-out instruments; vpi is the
// estimated covariance matrix of π̂ itself (iid, HC1 or cluster-robust), not
// scaled by n; n is the number of observations. The statistic does not depend
// on n once vpi is Var(π̂); n is kept so that Σ_ππ is formed as in the source.
// Any rescaling of qzz leaves F_eff unchanged.
//
// With homoskedastic errors, vpi = σ²(ZᵀZ)⁻¹ and F_eff is the usual first-stage
// F statistic π̂ᵀ vpi⁻¹ π̂ / K. F_eff is compared with the critical values of
// MOPCritical, or with the conservative 23.109 (5% level, 10% worst-case bias).
//
// EffectiveF panics if the lengths of pi, qzz and vpi differ, if pi is empty or
// if n < 1. It returns NaN when tr(Σ_ππ Q_ZZ) is not positive.
//
// Reference: Montiel Olea, J.L. and Pflueger, C. (2013), "A Robust Test for
// Weak Instruments", Journal of Business & Economic Statistics 31(3),
// 358-369, section 2 (definition of the effective F).
func EffectiveF(pi []float64, qzz *mat.SymDense, vpi *mat.SymDense, n int) float64 {
	k := len(pi)
	if k == 0 {
		panic("supplyshifters: EffectiveF needs at least one instrument")
	}
	if qzz.SymmetricDim() != k || vpi.SymmetricDim() != k {
		panic("supplyshifters: EffectiveF dimension mismatch between pi, qzz and vpi")
	}
	if n < 1 {
		panic("supplyshifters: EffectiveF needs n >= 1")
	}
	p := mat.NewVecDense(k, append([]float64(nil), pi...))
	num := float64(n) * mat.Inner(p, qzz, p)

	// tr(Σ_ππ Q_ZZ) = n Σ_ij V_ij Q_ji.
	var tr float64
	for i := 0; i < k; i++ {
		for j := 0; j < k; j++ {
			tr += vpi.At(i, j) * qzz.At(j, i)
		}
	}
	tr *= float64(n)
	if !(tr > 0) {
		return math.NaN()
	}
	return num / tr
}

// MOPCritical returns the critical value of the simplified (TSLS) weak-
// instrument test of Montiel Olea and Pflueger for the effective F statistic,
// at level alpha and worst-case relative bias tau, together with the effective
// degrees of freedom it uses.
//
//	x     = 1/τ
//	K_eff = [tr S]² (1 + 2x) / (tr(S S) + 2x · tr S · λmax(S))
//	crit  = χ²_{K_eff}(x·K_eff) upper-alpha quantile / K_eff
//
// where χ²_k(λ) is the noncentral chi-square distribution with k degrees of
// freedom (k need not be an integer) and noncentrality λ. s is
// S = Σ_ππ Q_ZZ, or its symmetric form Q_ZZ^½ Σ_ππ Q_ZZ^½; both have the same
// trace, tr(S S) and eigenvalues, and S may be scaled by any positive factor
// (so Var(π̂) Q_ZZ serves as well). With homoskedastic errors S ∝ I and
// K_eff = K; when S has rank one, K_eff = 1 and, for alpha = 0.05 and
// tau = 0.10, crit is the conservative 23.109.
//
// MOPCritical panics if s is not square, if alpha is not in (0, 1) or tau is
// not positive. It returns NaN values if tr S is not positive.
//
// Reference: Montiel Olea, J.L. and Pflueger, C. (2013), "A Robust Test for
// Weak Instruments", Journal of Business & Economic Statistics 31(3),
// 358-369, section 4 (simplified procedure).
func MOPCritical(alpha, tau float64, s *mat.Dense) (crit float64, keff float64) {
	r, c := s.Dims()
	if r != c {
		panic("supplyshifters: MOPCritical needs a square S")
	}
	if !(alpha > 0 && alpha < 1) {
		panic("supplyshifters: MOPCritical alpha must lie in (0, 1)")
	}
	if !(tau > 0) {
		panic("supplyshifters: MOPCritical tau must be positive")
	}
	var trS, trSS float64
	for i := 0; i < r; i++ {
		trS += s.At(i, i)
		for j := 0; j < r; j++ {
			trSS += s.At(i, j) * s.At(j, i)
		}
	}
	if !(trS > 0) {
		return math.NaN(), math.NaN()
	}
	lmax := maxRealEigen(s)
	x := 1 / tau
	keff = trS * trS * (1 + 2*x) / (trSS + 2*x*trS*lmax)
	crit = NoncentralChiSquaredQuantile(1-alpha, keff, x*keff) / keff
	return crit, keff
}

// maxRealEigen returns the largest real part among the eigenvalues of the
// square matrix s. S = Σ Q is similar to a symmetric positive semi-definite
// matrix, so its eigenvalues are real up to rounding.
func maxRealEigen(s *mat.Dense) float64 {
	r, _ := s.Dims()
	if mat.Equal(s, s.T()) {
		var es mat.EigenSym
		sym := mat.NewSymDense(r, nil)
		for i := 0; i < r; i++ {
			for j := i; j < r; j++ {
				sym.SetSym(i, j, s.At(i, j))
			}
		}
		if es.Factorize(sym, false) {
			v := es.Values(nil)
			return v[len(v)-1]
		}
	}
	var eg mat.Eigen
	if !eg.Factorize(s, mat.EigenNone) {
		return math.NaN()
	}
	best := math.Inf(-1)
	for _, v := range eg.Values(nil) {
		if real(v) > best {
			best = real(v)
		}
	}
	return best
}

// NoncentralChiSquaredCDF returns P(X ≤ x) for X noncentral chi-square with k
// degrees of freedom and noncentrality lambda, as the Poisson mixture of
// central chi-square distribution functions:
//
//	F(x; k, λ) = Σ_{j≥0} e^{-λ/2} (λ/2)^j / j! · P(k/2 + j, x/2)
//
// where P is the regularized lower incomplete gamma function. The sum starts
// at the Poisson mode and runs outward until the remaining terms are below
// 1e-17 of the total. k need not be an integer. It panics if k ≤ 0 or
// lambda < 0.
//
// Reference: Johnson, N.L., Kotz, S. and Balakrishnan, N. (1995), Continuous
// Univariate Distributions, Vol. 2, 2nd ed., Wiley, chapter 29, eq. (29.2).
// ISBN: 9780471584940.
func NoncentralChiSquaredCDF(x, k, lambda float64) float64 {
	checkNCX2(k, lambda)
	if math.IsNaN(x) {
		return math.NaN()
	}
	if x <= 0 {
		return 0
	}
	if math.IsInf(x, 1) {
		return 1
	}
	return ncx2Mixture(x, k, lambda, false)
}

// NoncentralChiSquaredSurvival returns P(X > x) = 1 - F(x; k, λ) for X
// noncentral chi-square, summed directly as the Poisson mixture of central
// upper tails Q(k/2 + j, x/2) so that small tail probabilities keep their
// relative accuracy. It panics if k ≤ 0 or lambda < 0.
func NoncentralChiSquaredSurvival(x, k, lambda float64) float64 {
	checkNCX2(k, lambda)
	if math.IsNaN(x) {
		return math.NaN()
	}
	if x <= 0 {
		return 1
	}
	if math.IsInf(x, 1) {
		return 0
	}
	return ncx2Mixture(x, k, lambda, true)
}

// NoncentralChiSquaredQuantile returns the p quantile of the noncentral
// chi-square distribution with k degrees of freedom and noncentrality lambda:
// the x with F(x; k, λ) = p. It brackets the root and bisects until the
// bracket is narrower than 1e-14 relative (far inside the 1e-10 target);
// above the median it solves on the survival function for accuracy. It
// returns 0 for p = 0 and +Inf for p = 1, and panics if p is outside [0, 1],
// k ≤ 0 or lambda < 0.
func NoncentralChiSquaredQuantile(p, k, lambda float64) float64 {
	checkNCX2(k, lambda)
	if !(p >= 0 && p <= 1) {
		panic("supplyshifters: noncentral chi-square probability outside [0, 1]")
	}
	if p == 0 {
		return 0
	}
	if p == 1 {
		return math.Inf(1)
	}
	upper := p > 0.5
	// below reports whether x lies below the quantile.
	below := func(x float64) bool {
		if upper {
			return ncx2Mixture(x, k, lambda, true) > 1-p
		}
		return ncx2Mixture(x, k, lambda, false) < p
	}
	lo := 0.0
	hi := k + lambda + 10*math.Sqrt(2*(k+2*lambda)) + 10
	for below(hi) {
		lo = hi
		hi *= 2
		if math.IsInf(hi, 1) {
			return hi
		}
	}
	for i := 0; i < 400; i++ {
		mid := lo + (hi-lo)/2
		if mid == lo || mid == hi || hi-lo <= 1e-14*hi {
			break
		}
		if below(mid) {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo + (hi-lo)/2
}

func checkNCX2(k, lambda float64) {
	if !(k > 0) || math.IsInf(k, 0) {
		panic("supplyshifters: noncentral chi-square needs finite k > 0")
	}
	if !(lambda >= 0) || math.IsInf(lambda, 0) {
		panic("supplyshifters: noncentral chi-square needs finite lambda >= 0")
	}
}

// ncx2Mixture sums Σ_j w_j G_j, where w_j are Poisson(λ/2) weights and G_j is
// the central chi-square (k+2j) distribution function at x (upper = false) or
// its survival function (upper = true). x must be positive and finite.
func ncx2Mixture(x, k, lambda float64, upper bool) float64 {
	central := func(j int) float64 {
		a := k/2 + float64(j)
		if upper {
			return mathext.GammaIncRegComp(a, x/2)
		}
		return mathext.GammaIncReg(a, x/2)
	}
	if lambda == 0 {
		return central(0)
	}
	const eps = 1e-17
	h := lambda / 2
	logh := math.Log(h)
	weight := func(j int) float64 {
		lg, _ := math.Lgamma(float64(j) + 1)
		return math.Exp(-h + float64(j)*logh - lg)
	}
	j0 := int(math.Floor(h))

	// Terms from the mode upward. The weights fall by the ratio h/(j+1) < 1,
	// the lower-tail G_j fall with j and the upper-tail G_j are at most 1.
	var sum float64
	w0 := weight(j0)
	w := w0
	for j := j0; ; j++ {
		g := central(j)
		sum += w * g
		r := h / float64(j+1)
		bound := g
		if upper {
			bound = 1
		}
		if r < 1 && w*bound*r/(1-r) <= eps*sum {
			break
		}
		if w == 0 || j > j0+100000 {
			break
		}
		w *= r
	}
	// Terms from just below the mode down to zero. The weights fall by the
	// ratio j/h < 1, the lower-tail G_j are at most 1 and the upper-tail G_j
	// fall as j decreases.
	w = w0
	for j := j0 - 1; j >= 0; j-- {
		w *= float64(j+1) / h
		g := central(j)
		sum += w * g
		r := float64(j) / h
		bound := 1.0
		if upper {
			bound = g
		}
		if w*bound*r/(1-r) <= eps*sum || w == 0 {
			break
		}
	}
	if sum > 1 {
		sum = 1
	}
	return sum
}
