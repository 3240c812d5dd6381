package ivcore

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// RankTol is the tolerance of the collinearity check: a column is
// collinear with earlier ones when the share of its (scaled) sum of squares
// that they leave unexplained is below RankTol.
const RankTol = 1e-9

// VariationTol is the tolerance of the fixed-effect variation check: a
// column has no variation left when its sum of squares after absorption is
// below VariationTol times its sum of squares before.
const VariationTol = 1e-14

// checkVariation returns a NoVariationError for the first column of idx
// whose absorbed sum of squares is negligible against m.Scale.
func (m *Moments) checkVariation(idx []int, roles []string) error {
	for i, a := range idx {
		ss := m.Gram.At(a, a)
		ref := 0.0
		if m.Scale != nil {
			ref = m.Scale[a]
		}
		if math.IsInf(ss, 0) || math.IsNaN(ss) || math.IsInf(ref, 0) {
			return fmt.Errorf("%s %q has values too large to square in double precision (sum of squares %g): rescale it (for example to thousands) or check the file for stray huge numbers", roles[i], m.Names[a], ss)
		}
		if ss <= 0 || (ref > 0 && ss <= VariationTol*ref) {
			return &NoVariationError{Column: m.Names[a], Role: roles[i]}
		}
	}
	return nil
}

// checkRank runs a Cholesky factorisation of the correlation-scaled Gram
// of the columns idx in the given order, one column at a time, and returns
// a CollinearError for the first column that earlier ones explain up to
// RankTol. roles names each column's role for the message.
func (m *Moments) checkRank(idx []int, roles []string) error {
	p := len(idx)
	d := make([]float64, p)
	for i, a := range idx {
		d[i] = math.Sqrt(m.Gram.At(a, a))
	}
	r := func(i, j int) float64 { return m.Gram.At(idx[i], idx[j]) / (d[i] * d[j]) }
	// L holds the rows of the Cholesky factor of accepted columns.
	L := make([][]float64, 0, p)
	acc := make([]int, 0, p)
	for i := 0; i < p; i++ {
		// Solve L l = r(acc, i).
		l := make([]float64, len(acc))
		for a := range acc {
			s := r(acc[a], i)
			for b := 0; b < a; b++ {
				s -= L[a][b] * l[b]
			}
			l[a] = s / L[a][a]
		}
		rest := 1.0
		for _, v := range l {
			rest -= v * v
		}
		if rest < RankTol {
			// Coefficients of the combination: solve Lᵀ c = l.
			c := make([]float64, len(acc))
			for a := len(acc) - 1; a >= 0; a-- {
				s := l[a]
				for b := a + 1; b < len(acc); b++ {
					s -= L[b][a] * c[b]
				}
				c[a] = s / L[a][a]
			}
			var on []string
			for a, ca := range c {
				if math.Abs(ca) > 1e-6 {
					on = append(on, m.Names[idx[acc[a]]])
				}
			}
			return &CollinearError{Column: m.Names[idx[i]], Role: roles[i], On: on, Ratio: math.Max(rest, 0)}
		}
		row := make([]float64, len(acc)+1)
		copy(row, l)
		row[len(acc)] = math.Sqrt(rest)
		L = append(L, row)
		acc = append(acc, i)
	}
	return nil
}

// scaledChol factorises a symmetric positive definite matrix after scaling
// it to unit diagonal, which keeps the factorisation accurate when columns
// differ in scale by orders of magnitude. It returns the factor of the
// scaled matrix and the scale d (S = D C Dᵀ with D = diag(d)).
type scaledChol struct {
	chol mat.Cholesky
	d    []float64
}

func newScaledChol(s mat.Symmetric) (*scaledChol, bool) {
	n := s.SymmetricDim()
	d := make([]float64, n)
	for i := range d {
		v := s.At(i, i)
		if !(v > 0) {
			return nil, false
		}
		d[i] = math.Sqrt(v)
	}
	c := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			c.SetSym(i, j, s.At(i, j)/(d[i]*d[j]))
		}
	}
	sc := &scaledChol{d: d}
	if !sc.chol.Factorize(c) {
		return nil, false
	}
	return sc, true
}

// solve returns S⁻¹ B.
func (sc *scaledChol) solve(b mat.Matrix) *mat.Dense {
	r, c := b.Dims()
	t := mat.NewDense(r, c, nil)
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			t.Set(i, j, b.At(i, j)/sc.d[i])
		}
	}
	var x mat.Dense
	_ = sc.chol.SolveTo(&x, t) // conditioning is reported by the caller's rank check
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			x.Set(i, j, x.At(i, j)/sc.d[i])
		}
	}
	return &x
}

// inverse returns S⁻¹ as a symmetric matrix.
func (sc *scaledChol) inverse() *mat.SymDense {
	n := len(sc.d)
	var inv mat.SymDense
	_ = sc.chol.InverseTo(&inv)
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			out.SetSym(i, j, inv.At(i, j)/(sc.d[i]*sc.d[j]))
		}
	}
	return out
}
