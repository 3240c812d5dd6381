package ivcore

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"
)

// Estimator selects a member of the k-class family.
type Estimator int

const (
	// OLS is ordinary least squares (k = 0); instruments are ignored.
	OLS Estimator = iota
	// TSLS is two-stage least squares (k = 1).
	TSLS
	// LIML is limited-information maximum likelihood (k = κ, the smallest
	// root of the LIML determinantal equation).
	LIML
	// Fuller is Fuller's (1977) modification of LIML, k = κ - α/(n - L)
	// with α = 1 by default.
	Fuller
)

var estimatorNames = []string{"ols", "2sls", "liml", "fuller", "gmm"}

func (e Estimator) String() string {
	if int(e) < len(estimatorNames) {
		return estimatorNames[e]
	}
	return fmt.Sprintf("Estimator(%d)", int(e))
}

// ParseEstimator reads "ols", "2sls", "liml" or "fuller".
func ParseEstimator(s string) (Estimator, error) {
	for i, n := range estimatorNames {
		if strings.EqualFold(s, n) {
			return Estimator(i), nil
		}
	}
	if strings.EqualFold(s, "tsls") {
		return TSLS, nil
	}
	return 0, fmt.Errorf("unknown estimator %q: choose one of %s", s, strings.Join(estimatorNames, ", "))
}

// Model names the roles of the columns of a Moments value by index.
type Model struct {
	// Y is the outcome column.
	Y int
	// Endog are the endogenous regressors.
	Endog []int
	// Exog are the exogenous regressors, including an intercept column
	// when the model has one. They serve as their own instruments.
	Exog []int
	// Instr are the excluded instruments.
	Instr []int
	// FullerAlpha is Fuller's α; 0 means 1.
	FullerAlpha float64
}

// X returns the regressors: endogenous first, then exogenous.
func (md Model) X() []int { return append(append([]int(nil), md.Endog...), md.Exog...) }

// Z returns all instruments: exogenous regressors first, then excluded.
func (md Model) Z() []int { return append(append([]int(nil), md.Exog...), md.Instr...) }

// Fit is an estimated linear model.
type Fit struct {
	Estimator Estimator
	Model     Model
	// Names are the regressor names, in the order of Model.X().
	Names []string
	// Coef are the estimates, in the order of Names.
	Coef []float64
	// Kappa is k of the k-class estimator (0 for OLS, 1 for 2SLS).
	Kappa float64
	// LIMLKappa is the LIML root κ (LIML and Fuller only).
	LIMLKappa float64
	// N is the number of observations.
	N int
	// K counts the parameters: regressors plus absorbed fixed-effect
	// levels.
	K int
	// SSR is the sum of squared residuals; Sigma2 = SSR/(N-K).
	SSR, Sigma2 float64
	// Cov is the estimated covariance of Coef.
	Cov *mat.SymDense
	// Vcov describes the covariance estimator used.
	Vcov VcovInfo

	m     *Moments
	pi    *mat.Dense // first-stage coefficients, |Z|×|X| (nil for OLS)
	bread *mat.SymDense
	resid []float64 // residual as a combination of the columns: e = A r
}

// Moments returns the moment blocks the fit was computed from.
func (f *Fit) Moments() *Moments { return f.m }

// Residual returns the residual as a combination of the Moments columns:
// e = A r, where r has 1 at Y and -b_j at regressor j.
func (f *Fit) Residual() []float64 { return append([]float64(nil), f.resid...) }

// SE returns the standard error of coefficient j.
func (f *Fit) SE(j int) float64 { return math.Sqrt(f.Cov.At(j, j)) }

// Index returns the position of a regressor by name, or -1.
func (f *Fit) Index(name string) int {
	for i, s := range f.Names {
		if s == name {
			return i
		}
	}
	return -1
}

// Estimate fits model md on the moments m with estimator est and a
// covariance of kind vk. The k-class estimator is
//
//	b = [Xᵀ(I - k M_Z)X]⁻¹ Xᵀ(I - k M_Z) y
//
// computed from the Gram blocks as H = (1-k) XᵀX + k XᵀP_Z X and
// g = (1-k) Xᵀy + k XᵀP_Z y, with XᵀP_Z X = XᵀZ (ZᵀZ)⁻¹ ZᵀX. The LIML
// root κ is the smallest eigenvalue of (WᵀM_Z W)⁻¹ WᵀM_{X₁} W with
// W = [y, endogenous] and X₁ the exogenous regressors; Fuller's estimator
// uses k = κ - α/(N - L) where L counts all instruments and absorbed
// levels. See Davidson & MacKinnon, Econometric Theory and Methods (2004),
// ch. 8, ISBN 9780195123722; Fuller (1977), Econometrica 45(4), 939-953.
//
// Estimate returns an error naming the columns when the order condition
// fails, a column has no variation after absorption, or the design is
// singular.
func Estimate(m *Moments, md Model, est Estimator, vk VcovKind) (*Fit, error) {
	if est == OLS {
		md = Model{Y: md.Y, Exog: md.X()} // all regressors are their own instruments
	}
	xi := md.X()
	zi := md.Z()
	if len(xi) == 0 {
		return nil, errors.New("ivcore: the model has no regressors")
	}
	if est == GMM {
		r, err := TwoStepGMM(m, md, vk)
		if err != nil {
			return nil, err
		}
		return r.Fit, nil
	}
	if len(md.Instr) < len(md.Endog) {
		return nil, &OrderError{Endogenous: m.names(md.Endog), Instruments: m.names(md.Instr)}
	}
	K := len(xi) + m.AbsorbedDoF
	if m.N <= K {
		return nil, fmt.Errorf("%w: %d observations for %d parameters (%d regressors and %d absorbed fixed-effect levels)", ErrTooFewRows, m.N, K, len(xi), m.AbsorbedDoF)
	}
	if err := m.checkDesign(md); err != nil {
		return nil, err
	}

	f := &Fit{Estimator: est, Model: md, Names: m.names(xi), N: m.N, K: K, m: m}
	sxx := m.subSym(xi)
	sxy := m.sub(xi, []int{md.Y})
	var xpx *mat.SymDense // XᵀP_Z X
	var xpy *mat.Dense    // XᵀP_Z y
	if est != OLS {
		czz, ok := newScaledChol(m.subSym(zi))
		if !ok {
			return nil, fmt.Errorf("%w: the instrument cross-product matrix is not positive definite", ErrCollinear)
		}
		szx := m.sub(zi, xi)
		f.pi = czz.solve(szx)
		var t mat.Dense
		t.Mul(szx.T(), f.pi)
		xpx = symmetrize(&t)
		xpy = mat.NewDense(len(xi), 1, nil)
		xpy.Mul(f.pi.T(), m.sub(zi, []int{md.Y}))
	}
	switch est {
	case OLS:
		f.Kappa = 0
	case TSLS:
		f.Kappa = 1
	case LIML, Fuller:
		kappa, err := limlKappa(m, md)
		if err != nil {
			return nil, err
		}
		f.LIMLKappa = kappa
		f.Kappa = kappa
		if est == Fuller {
			alpha := md.FullerAlpha
			if alpha == 0 {
				alpha = 1
			}
			L := len(zi) + m.AbsorbedDoF
			f.Kappa = kappa - alpha/float64(m.N-L)
		}
	}
	h := mat.NewSymDense(len(xi), nil)
	g := mat.NewDense(len(xi), 1, nil)
	k := f.Kappa
	for i := range xi {
		for j := i; j < len(xi); j++ {
			v := (1 - k) * sxx.At(i, j)
			if xpx != nil {
				v += k * xpx.At(i, j)
			}
			h.SetSym(i, j, v)
		}
		v := (1 - k) * sxy.At(i, 0)
		if xpy != nil {
			v += k * xpy.At(i, 0)
		}
		g.Set(i, 0, v)
	}
	ch, ok := newScaledChol(h)
	if !ok {
		return nil, fmt.Errorf("%w: the k-class normal equations are not positive definite (instruments too weak or k too large)", ErrCollinear)
	}
	b := ch.solve(g)
	f.Coef = make([]float64, len(xi))
	for i := range xi {
		f.Coef[i] = b.At(i, 0)
	}
	f.bread = ch.inverse()

	// Residual as a combination of the columns, and its sum of squares.
	f.resid = make([]float64, len(m.Names))
	f.resid[md.Y] = 1
	for i, c := range xi {
		f.resid[c] -= f.Coef[i]
	}
	f.SSR = m.quad(f.resid)
	f.Sigma2 = f.SSR / float64(m.N-K)

	cov, info, err := f.covariance(vk)
	if err != nil {
		return nil, err
	}
	f.Cov, f.Vcov = cov, info
	return f, nil
}

// quad returns rᵀ(AᵀA)r, the sum of squares of the combination A r,
// floored at zero.
func (m *Moments) quad(r []float64) float64 {
	s := 0.0
	for i, ri := range r {
		if ri == 0 {
			continue
		}
		for j, rj := range r {
			if rj != 0 {
				s += ri * rj * m.Gram.At(i, j)
			}
		}
	}
	return math.Max(s, 0)
}

// checkDesign checks variation and rank of the regressors and instruments.
func (m *Moments) checkDesign(md Model) error {
	var idx []int
	var roles []string
	add := func(cols []int, role string) {
		for _, c := range cols {
			idx = append(idx, c)
			roles = append(roles, role)
		}
	}
	add(md.Exog, "control")
	add(md.Endog, "regressor")
	add(md.Instr, "instrument")
	if err := m.checkVariation(idx, roles); err != nil {
		return err
	}
	for i := range roles {
		if roles[i] == "control" {
			roles[i] = "regressor"
		}
	}
	// Regressors first, then the instruments on top of the exogenous ones.
	nx := len(md.Exog) + len(md.Endog)
	if err := m.checkRank(idx[:nx], roles[:nx]); err != nil {
		return err
	}
	z := append(append([]int(nil), md.Exog...), md.Instr...)
	zr := make([]string, len(z))
	for i := range zr {
		zr[i] = "instrument"
	}
	for i := range md.Exog {
		zr[i] = "regressor"
	}
	return m.checkRank(z, zr)
}

func (m *Moments) names(idx []int) []string {
	s := make([]string, len(idx))
	for i, c := range idx {
		s[i] = m.Names[c]
	}
	return s
}

// limlKappa returns the smallest root κ of det(WᵀM_{X₁}W - κ WᵀM_Z W) = 0.
func limlKappa(m *Moments, md Model) (float64, error) {
	w := append([]int{md.Y}, md.Endog...)
	a := residualGram(m, w, md.Z())   // WᵀM_Z W
	bm := residualGram(m, w, md.Exog) // WᵀM_{X₁} W
	var ca mat.Cholesky
	if !ca.Factorize(a) {
		return 0, fmt.Errorf("%w: LIML needs WᵀM_Z W positive definite (outcome or price fitted exactly by the instruments)", ErrCollinear)
	}
	var l mat.TriDense
	ca.LTo(&l)
	// C = L⁻¹ B L⁻ᵀ
	var li mat.TriDense
	if err := li.InverseTri(&l); err != nil {
		return 0, fmt.Errorf("ivcore: LIML: %v", err)
	}
	var t, c mat.Dense
	t.Mul(&li, bm)
	c.Mul(&t, li.T())
	var es mat.EigenSym
	if !es.Factorize(symmetrize(&c), false) {
		return 0, errors.New("ivcore: LIML eigenvalue problem did not converge")
	}
	vals := es.Values(nil)
	kappa := vals[0]
	for _, v := range vals {
		kappa = math.Min(kappa, v)
	}
	return kappa, nil
}

// residualGram returns WᵀM_V W, the Gram of columns w after projecting out
// columns v (WᵀW when v is empty).
func residualGram(m *Moments, w, v []int) *mat.SymDense {
	sww := m.subSym(w)
	if len(v) == 0 {
		return sww
	}
	cv, ok := newScaledChol(m.subSym(v))
	if !ok {
		return sww
	}
	svw := m.sub(v, w)
	proj := cv.solve(svw)
	var t mat.Dense
	t.Mul(svw.T(), proj)
	out := mat.NewSymDense(len(w), nil)
	for i := range w {
		for j := i; j < len(w); j++ {
			out.SetSym(i, j, sww.At(i, j)-t.At(i, j))
		}
	}
	return out
}

// symmetrize returns (A + Aᵀ)/2 as a SymDense.
func symmetrize(a mat.Matrix) *mat.SymDense {
	n, _ := a.Dims()
	s := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			s.SetSym(i, j, (a.At(i, j)+a.At(j, i))/2)
		}
	}
	return s
}
