package ivcore

import (
	"errors"
	"math"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// ErrNoRows is returned when a statistic needs a pass over the rows but
// the moments were supplied without them.
var ErrNoRows = errors.New("ivcore: this statistic needs the row data (HC1 needs one pass over the rows), but only moment sums are available")

// ErrPrecision is returned when an HC1 statistic of moments without rows
// would lose more than about 1e-10 of its value to cancellation: a
// residual is tiny against the columns it combines, and the fourth-order
// sums cannot resolve it.
var ErrPrecision = errors.New("ivcore: a residual is too small against its columns for the fourth-order sums to give its HC1 statistic to 1e-10 (the fit is nearly exact); use the cluster-robust or iid covariance, or estimate from the rows")

// ScoreCov returns the outer-product sum of unit scores
//
//	S = Σ_u s_u s_uᵀ,   s_u = [W_uᵀ A_u r_1; …; W_uᵀ A_u r_m]
//
// where W are the columns indexed by w, A are all columns, and each r_p is
// a vector of length K forming a residual e_p = A r_p. A unit u is a row
// when dim < 0 and a cluster of m.Clusters[dim] otherwise (computed from
// the per-cluster blocks, no pass over rows). The result is (m·|w|)
// square, ordered residual-major: the block of r_p comes before that of
// r_{p+1}.
//
// With dim < 0 the row sum is a contraction of the fourth-order row
// moments of the columns (see fourth.go), which are summed in one pass
// over m.Cols on the first such call and kept: every later HC1 statistic
// of m, of its copies by Recode and of the values derived from it by
// Transform costs no pass. With more than 12 columns (where that table
// outgrows a pass) each call makes its own pass over the rows instead.
// Moments made by Transform use the rows of the value they were derived
// from, whether or not their own Cols were formed. ErrNoRows is returned
// when there are no rows.
//
// This covers the meat of HC1 and cluster-robust sandwiches (m = 1) and the
// joint covariance of several first-stage regressions needed by the
// Kleibergen-Paap statistic (m > 1).
func (m *Moments) ScoreCov(w []int, r [][]float64, dim int) (*mat.SymDense, error) {
	k := len(m.Names)
	for _, rp := range r {
		if len(rp) != k {
			panic("ivcore: residual combination length differs from the column count")
		}
	}
	wc := make([]combo, len(w))
	for a, j := range w {
		if j < 0 || j >= k {
			panic("ivcore: score column out of range")
		}
		wc[a] = combo{{j: j, c: 1}}
	}
	return m.scoreCov(wc, r, dim)
}

// term is one non-zero entry c of a combination, on column j.
type term struct {
	j int
	c float64
}

// combo is a sparse combination of columns, Σ c_t A_{j_t}: a column of
// the K×|w| matrix W of score columns.
type combo []term

// denseCombo returns the non-zero entries of v.
func denseCombo(v []float64) combo {
	var c combo
	for j, x := range v {
		if x != 0 {
			c = append(c, term{j, x})
		}
	}
	return c
}

// scoreCov is ScoreCov for score columns that are combinations of the
// columns, A W with W the K×|w| matrix whose columns are w:
//
//	S = Σ_u s_u s_uᵀ,   s_u = [(A_u W)ᵀ A_u r_1; …; (A_u W)ᵀ A_u r_m]
//
// ScoreCov is scoreCov with W made of unit columns.
func (m *Moments) scoreCov(w []combo, r [][]float64, dim int) (*mat.SymDense, error) {
	d := len(w) * len(r)
	var out []float64
	if dim >= 0 {
		k := len(m.Names)
		out = make([]float64, d*d)
		cb := m.Clusters[dim]
		s := make([]float64, d)
		for g := 0; g < cb.Dim.G; g++ {
			blk := cb.Block(g)
			for p, rp := range r {
				for a, wa := range w {
					v := 0.0
					for _, e := range wa {
						row := blk[e.j*k : e.j*k+k]
						x := 0.0
						for j, rj := range rp {
							x += row[j] * rj
						}
						v += e.c * x
					}
					s[p*len(w)+a] = v
				}
			}
			outerAdd(out, s)
		}
	} else {
		var err error
		if out, err = m.rowScoreSum(w, r); err != nil {
			return nil, err
		}
	}
	sym := mat.NewSymDense(d, nil)
	for i := 0; i < d; i++ {
		for j := i; j < d; j++ {
			sym.SetSym(i, j, out[i*d+j])
		}
	}
	return sym, nil
}

// rowScoreSum returns the upper triangle of Σ_i s_i s_iᵀ (d×d row-major)
// for row scores of the combinations w and residuals r of m's columns.
// When m was made by Transform, w and r are first mapped through its T to
// combinations of the columns holding the rows:
//
//	W' = T W,   r'_p = T r_p
//
// The sum is then a contraction of the cached fourth moments, or, above
// fourthCap columns, one pass over the rows.
func (m *Moments) rowScoreSum(w []combo, r [][]float64) ([]float64, error) {
	src, t, hc := m.rowSource()
	supplied := src.Cols == nil && hc.m4 != nil // fourth moments from elsewhere (SetFourth)
	if src.Cols == nil && !supplied {
		return nil, ErrNoRows
	}
	if t != nil {
		kp, k := len(src.Names), len(m.Names)
		w2 := make([]combo, len(w))
		for a, wa := range w {
			v := make([]float64, kp)
			for l := range v {
				for _, e := range wa {
					v[l] += t[l*k+e.j] * e.c
				}
			}
			w2[a] = denseCombo(v)
		}
		r2 := make([][]float64, len(r))
		for p, rp := range r {
			v := make([]float64, kp)
			for l := range v {
				tl := t[l*k : (l+1)*k]
				for j, rj := range rp {
					v[l] += tl[j] * rj
				}
			}
			r2[p] = v
		}
		w, r = w2, r2
	}
	d := len(w) * len(r)
	out := make([]float64, d*d)
	if supplied {
		// No rows to fall back on: the contraction is the statistic,
		// unless it would lose the residual's digits.
		wa, ra := hc.augment(w, r)
		if cancels(src, r, ra) {
			return nil, ErrPrecision
		}
		fourthScoreCov(out, hc.m4, len(src.Names)+1, wa, ra)
		return out, nil
	}
	if m4 := src.fourth(hc); m4 != nil {
		wa, ra := hc.augment(w, r)
		if !cancels(src, r, ra) {
			fourthScoreCov(out, m4, len(src.Cols)+1, wa, ra)
			return out, nil
		}
	}
	hc.passes.Add(1)
	rowScoreCov(out, src.Cols, w, r, runtime.NumCPU())
	return out, nil
}

// cancelRatio bounds how small a residual may be, in root mean square,
// against the sum of its absolute coefficients on the centred and scaled
// basis, before the contraction of fourth moments would lose more than
// about 1e-10 of the score covariance to cancellation; below it, the
// statistic takes its own pass over the rows.
const cancelRatio = 1e-3

// cancels reports whether any residual combination r (of src's columns;
// ra the same on the basis of the cached moments) is so small against its
// terms that the fourth-moment contraction would lose digits.
func cancels(src *Moments, r, ra [][]float64) bool {
	for p, rp := range r {
		size := 0.0
		for _, v := range ra[p] {
			size += math.Abs(v)
		}
		rms := math.Sqrt(src.quad(rp) / float64(max(src.N, 1)))
		if rms < cancelRatio*size {
			return true
		}
	}
	return false
}

// outerAdd adds the upper triangle of s sᵀ into out (d×d row-major).
func outerAdd(out, s []float64) {
	d := len(s)
	for i, si := range s {
		if si == 0 {
			continue
		}
		row := out[i*d:]
		for j := i; j < d; j++ {
			row[j] += si * s[j]
		}
	}
}

// rowScoreCov adds the upper triangle of Σ_i s_i s_iᵀ into out in one
// pass over the rows: row scores are summed over fixed chunks in parallel
// and the chunk sums are added in chunk order (deterministic for any
// worker count). It is the path of more than fourthCap columns and the
// reference for the fourth-moment contraction.
func rowScoreCov(out []float64, cols [][]float64, w []combo, r [][]float64, workers int) {
	n := len(cols[0])
	d := len(w) * len(r)
	nch := (n + chunkRows - 1) / chunkRows
	parts := make([][]float64, nch)
	next := make(chan int, nch)
	for c := 0; c < nch; c++ {
		next <- c
	}
	close(next)
	var wg sync.WaitGroup
	for g := 0; g < min(workers, max(nch, 1)); g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			e := make([]float64, len(r))
			u := make([]float64, len(w))
			s := make([]float64, d)
			for c := range next {
				lo, hi := c*chunkRows, min((c+1)*chunkRows, n)
				p := make([]float64, d*d)
				for i := lo; i < hi; i++ {
					for q, rq := range r {
						v := 0.0
						for j, rj := range rq {
							if rj != 0 {
								v += cols[j][i] * rj
							}
						}
						e[q] = v
					}
					for a, wa := range w {
						v := 0.0
						for _, t := range wa {
							v += t.c * cols[t.j][i]
						}
						u[a] = v
					}
					for q := range r {
						for a, ua := range u {
							s[q*len(w)+a] = ua * e[q]
						}
					}
					outerAdd(p, s)
				}
				parts[c] = p
			}
		}()
	}
	wg.Wait()
	for _, p := range parts {
		for i := range out {
			out[i] += p[i]
		}
	}
}
