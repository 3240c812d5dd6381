package ivcore

import (
	"errors"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// ErrNoRows is returned when a statistic needs a pass over the rows but
// the moments were supplied without them.
var ErrNoRows = errors.New("ivcore: this statistic needs the row data (HC1 needs one pass over the rows), but only moment sums are available")

// ScoreCov returns the outer-product sum of unit scores
//
//	S = Σ_u s_u s_uᵀ,   s_u = [W_uᵀ A_u r_1; …; W_uᵀ A_u r_m]
//
// where W are the columns indexed by w, A are all columns, and each r_p is
// a vector of length K forming a residual e_p = A r_p. A unit u is a row
// when dim < 0 (one pass over m.Cols) and a cluster of m.Clusters[dim]
// otherwise (computed from the per-cluster blocks, no pass over rows).
// The result is (m·|w|) square, ordered residual-major: the block of r_p
// comes before that of r_{p+1}.
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
	d := len(w) * len(r)
	out := make([]float64, d*d)
	if dim >= 0 {
		cb := m.Clusters[dim]
		s := make([]float64, d)
		for g := 0; g < cb.Dim.G; g++ {
			blk := cb.Block(g)
			for p, rp := range r {
				for a, wa := range w {
					row := blk[wa*k : wa*k+k]
					v := 0.0
					for j, rj := range rp {
						v += row[j] * rj
					}
					s[p*len(w)+a] = v
				}
			}
			outerAdd(out, s)
		}
	} else {
		if m.Cols == nil {
			return nil, ErrNoRows
		}
		rowScoreCov(out, m.Cols, w, r, runtime.NumCPU())
	}
	sym := mat.NewSymDense(d, nil)
	for i := 0; i < d; i++ {
		for j := i; j < d; j++ {
			sym.SetSym(i, j, out[i*d+j])
		}
	}
	return sym, nil
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

// rowScoreCov sums row scores over fixed chunks in parallel and adds the
// chunk sums in chunk order (deterministic for any worker count).
func rowScoreCov(out []float64, cols [][]float64, w []int, r [][]float64, workers int) {
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
					for q := range r {
						for a, wa := range w {
							s[q*len(w)+a] = cols[wa][i] * e[q]
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
