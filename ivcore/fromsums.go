package ivcore

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// FromSums returns the Moments of K named columns from sums computed
// elsewhere (a database, a file of sums): n rows and the Gram matrix
// gram = Σ_i a_i a_iᵀ (K×K row-major, symmetric). The value has no rows
// (Cols is nil): statistics that need a pass over the rows (HC1) return
// ErrNoRows unless the fourth-order row moments are supplied with
// SetFourth. FromSums panics if gram is not K×K.
func FromSums(names []string, n int, gram []float64) *Moments {
	k := len(names)
	if len(gram) != k*k {
		panic(fmt.Sprintf("ivcore: Gram of %d entries for %d columns", len(gram), k))
	}
	g := mat.NewSymDense(k, nil)
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			g.SetSym(a, b, gram[a*k+b])
		}
	}
	return &Moments{Names: append([]string(nil), names...), N: n, Gram: g, hc: &hcLink{}}
}

// AddClusterBlocks appends a clustering dimension whose per-cluster Gram
// matrices were computed elsewhere: blocks holds dim.G full K×K row-major
// matrices, Block_g = Σ_{i∈g} a_i a_iᵀ, one after the other, and sizes
// (nil when unknown) the number of rows in each cluster. dim.Codes may be
// nil: every cluster statistic is computed from the blocks. It panics if
// the lengths do not match.
func (m *Moments) AddClusterBlocks(dim ClusterDim, blocks []float64, sizes []int) {
	k := len(m.Names)
	if len(blocks) != dim.G*k*k {
		panic(fmt.Sprintf("ivcore: %d block entries for %d clusters of %d columns", len(blocks), dim.G, k))
	}
	if sizes != nil && len(sizes) != dim.G {
		panic("ivcore: cluster sizes differ in number from the clusters")
	}
	if sizes != nil {
		dim.Sizes = append([]int(nil), sizes...)
	}
	m.Clusters = append(m.Clusters, &ClusterBlocks{Dim: dim, data: blocks, k: k})
}

// SetFourth supplies the fourth-order row moments of a value without rows,
// so that its HC1 statistics need no pass over the rows. With
// b_j = (A_j - shift_j)/scale_j and the basis c = [1, b_1, …, b_K], m4
// holds the C(K+4, 4) distinct sums
//
//	M4[p,q,r,s] = Σ_i c_ip c_iq c_ir c_is,   p ≤ q ≤ r ≤ s,
//
// in colexicographic order: M4[p,q,r,s] sits at
// p + C(q+1,2) + C(r+2,3) + C(s+3,4). Any shift and non-zero scale give
// the same statistics; centring and scaling keep the residual's digits
// (see fourth.go). SetFourth panics on wrong lengths or when the value
// already has rows.
func (m *Moments) SetFourth(shift, scale, m4 []float64) {
	k := len(m.Names)
	if m.Cols != nil {
		panic("ivcore: SetFourth on a value with rows")
	}
	if len(shift) != k || len(scale) != k || len(m4) != fourthLen(k+1) {
		panic(fmt.Sprintf("ivcore: fourth moments of %d columns need %d shifts and scales and %d sums", k, k, fourthLen(k+1)))
	}
	hc := m.link()
	hc.once.Do(func() {
		hc.shift = append([]float64(nil), shift...)
		hc.scale = append([]float64(nil), scale...)
		hc.m4 = append([]float64(nil), m4...)
	})
}

// FourthLen returns C(K+4, 4), the number of sums SetFourth takes for K
// columns.
func FourthLen(k int) int { return fourthLen(k + 1) }

// FourthIndex returns the position of M4[p,q,r,s], p ≤ q ≤ r ≤ s, among
// the sums SetFourth takes.
func FourthIndex(p, q, r, s int) int { return fourthIndex(p, q, r, s) }
