package ivcore

import "gonum.org/v1/gonum/mat"

// Pi returns the first-stage coefficients Π = (ZᵀZ)⁻¹ZᵀX, |Z|×|X| with
// rows ordered as Model.Z() and columns as Model.X(); nil for OLS. The
// matrix must not be modified.
func (f *Fit) Pi() *mat.Dense { return f.pi }

// Bread returns H⁻¹, the inverse of the k-class normal-equation matrix
// H = Xᵀ(I - k M_Z)X. The matrix must not be modified.
func (f *Fit) Bread() *mat.SymDense { return f.bread }
