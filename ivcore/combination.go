package ivcore

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// A combination is a vector c of length K = len(m.Names) standing for the
// column A c = Σ_l c_l A_l, for example a residual (Fit.Residual) or an
// outcome net of a hypothesised effect, y - b₀x. Its cross-products follow
// from the Gram matrix, so statistics of combinations need no pass over
// the rows.

// Unit returns the combination that picks column j alone. It panics if j
// is out of range.
func (m *Moments) Unit(j int) []float64 {
	c := make([]float64, len(m.Names))
	c[j] = 1
	return c
}

// Cross returns the cross-product of the combinations A a and A b:
//
//	(A a)ᵀ(A b) = aᵀ (AᵀA) b
//
// It panics if a or b does not have one entry per column.
func (m *Moments) Cross(a, b []float64) float64 {
	k := len(m.Names)
	if len(a) != k || len(b) != k {
		panic("ivcore: combination length differs from the column count")
	}
	s := 0.0
	for i, ai := range a {
		if ai == 0 {
			continue
		}
		for j, bj := range b {
			if bj != 0 {
				s += ai * bj * m.Gram.At(i, j)
			}
		}
	}
	return s
}

// Regress fits the combination A y on the columns idx by least squares,
// from the Gram matrix alone:
//
//	c = (VᵀV)⁻¹ Vᵀ A y,   r = y - Σ_j c_j e_{idx_j}
//
// where V are the columns idx. It returns the coefficients c (in the order
// of idx), inv = (VᵀV)⁻¹ and the residual combination r (A r is the
// residual). With idx empty, c and inv are nil and r is a copy of y. The
// system is solved on the Gram scaled to unit diagonal; an error wrapping
// ErrCollinear is returned when VᵀV is not positive definite. Regress
// panics if y does not have one entry per column.
func (m *Moments) Regress(y []float64, idx []int) (coef []float64, inv *mat.SymDense, resid []float64, err error) {
	k := len(m.Names)
	if len(y) != k {
		panic("ivcore: combination length differs from the column count")
	}
	resid = append([]float64(nil), y...)
	if len(idx) == 0 {
		return nil, nil, resid, nil
	}
	ch, ok := newScaledChol(m.subSym(idx))
	if !ok {
		return nil, nil, nil, fmt.Errorf("%w: the cross-product matrix of %s is not positive definite", ErrCollinear, quoteList(m.names(idx)))
	}
	rhs := mat.NewDense(len(idx), 1, nil)
	for a, c := range idx {
		s := 0.0
		for l, yl := range y {
			if yl != 0 {
				s += m.Gram.At(c, l) * yl
			}
		}
		rhs.Set(a, 0, s)
	}
	b := ch.solve(rhs)
	coef = make([]float64, len(idx))
	for a, c := range idx {
		coef[a] = b.At(a, 0)
		resid[c] -= coef[a]
	}
	return coef, ch.inverse(), resid, nil
}
