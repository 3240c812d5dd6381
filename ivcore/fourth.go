package ivcore

import (
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// Every HC1 statistic of a Moments value is a contraction of the
// fourth-order row moments of its K columns,
//
//	M4[j,k,l,m] = Σ_i a_ij a_ik a_il a_im
//
// because a row score is a product of two linear forms in the row a_i:
//
//	Σ_i (r_pᵀa_i)(r_qᵀa_i)(W_aᵀa_i)(W_bᵀa_i) = Σ_{j,l,s,t} r_pj r_ql W_sa W_tb M4[j,l,s,t]
//
// (White 1980, Econometrica 48(4), 817-838, for the sandwich; the
// contraction is plain algebra). M4 is symmetric in its four indices, so
// only the C(K+3,4) entries with j ≤ k ≤ l ≤ m are kept: 126 for K = 6,
// 1365 for K = 12. They are summed in one pass over the rows the first
// time a row statistic is asked for, and every later HC1 statistic of the
// value, of the values derived from it by Transform and of its copies by
// Recode is a contraction costing O(K⁴) per residual, whatever the number
// of rows.
//
// Above fourthCap columns the table and the pass grow as K⁴ per row, so
// ScoreCov falls back to one pass over the rows per call.

// fourthCap is the largest column count for which the fourth-order row
// moments are cached (C(15,4) = 1365 entries at K = 12).
const fourthCap = 12

// fourthBlock is the number of rows whose pair products are formed
// together; the pair products of a block (K(K+1)/2 × fourthBlock values)
// stay in the cache while they are multiplied.
const fourthBlock = 256

// hcLink ties a Moments value to the rows its HC1 statistics pass over:
// its own columns (parent nil), whose fourth moments it caches, or those
// of the value it was derived from by Transform.
type hcLink struct {
	// parent holds the rows when this value was made by Transform; its
	// own link has parent nil.
	parent *Moments
	// t maps the columns of parent to those of this value (K_parent × K,
	// row-major): column j is Σ_l t[l·K+j] A_l.
	t []float64

	once sync.Once
	// m4 holds the distinct fourth moments of the centred and scaled
	// basis [1, b_1, …, b_K], b_j = (A_j - shift_j)/scale_j (nil when
	// K > fourthCap).
	m4           []float64
	shift, scale []float64
	passes       atomic.Int64 // passes over the rows made for HC1 statistics
}

// hcInit guards the lazy creation of the link of values not made by
// Accumulate or Transform (a Moments literal).
var hcInit sync.Mutex

// link returns the value's link, creating it on first use.
func (m *Moments) link() *hcLink {
	hcInit.Lock()
	defer hcInit.Unlock()
	if m.hc == nil {
		m.hc = &hcLink{}
	}
	return m.hc
}

// rowSource returns the value whose columns hold the rows of m's HC1
// statistics, the map t from its columns to m's (nil when it is m itself)
// and its link.
func (m *Moments) rowSource() (src *Moments, t []float64, hc *hcLink) {
	l := m.link()
	if l.parent == nil {
		return m, nil, l
	}
	return l.parent, l.t, l.parent.link()
}

// RowPasses returns the number of passes over the rows that HC1
// statistics (ScoreCov with dim < 0, and so HC1 covariances, first stages
// and diagnostics) and Transform's forming of rows have made so far for m,
// for the values derived from it by Transform and for its copies by
// Recode, which share its rows. It is a diagnostic for tests and
// benchmarks: with at most 12 columns every HC1 statistic comes from one
// pass, so the count stays at 0 or 1 however many statistics are asked
// for; with more columns each one makes its own pass.
func (m *Moments) RowPasses() int {
	_, _, hc := m.rowSource()
	return int(hc.passes.Load())
}

// fourth returns the distinct fourth moments of m's columns, summing them
// in one pass on first use, or nil when m has no rows or more than
// fourthCap columns. hc must be m's link.
func (m *Moments) fourth(hc *hcLink) []float64 {
	if m.Cols == nil || len(m.Cols) > fourthCap {
		return nil
	}
	hc.once.Do(func() {
		hc.shift, hc.scale = fourthCentre(m.Cols)
		hc.m4 = fourthMomentsAffine(m.Cols, hc.shift, hc.scale, runtime.NumCPU())
		hc.passes.Add(1)
	})
	return hc.m4
}

// fourthCentre returns a shift and a scale for each column, taken from
// the first chunk of rows (its mean and root mean square deviation; scale
// 1 when the chunk does not vary). Fourth moments of raw columns with
// large means lose the residual's digits to cancellation when a score
// covariance is contracted from them (a level quantity around 1e6 whose
// residual is 1e4); moments of centred, scaled columns keep them. The
// first chunk is close enough to the whole for this purpose, and reading
// it twice keeps the statistics to one pass over the data.
func fourthCentre(cols [][]float64) (shift, scale []float64) {
	shift = make([]float64, len(cols))
	scale = make([]float64, len(cols))
	for j, c := range cols {
		c = c[:min(len(c), chunkRows)]
		mu := 0.0
		for _, v := range c {
			mu += v
		}
		if len(c) > 0 {
			mu /= float64(len(c))
		}
		ss := 0.0
		for _, v := range c {
			ss += (v - mu) * (v - mu)
		}
		sd := 0.0
		if len(c) > 0 {
			sd = math.Sqrt(ss / float64(len(c)))
		}
		if !(sd > 0) || math.IsInf(sd, 0) {
			sd = 1
		}
		shift[j], scale[j] = mu, sd
	}
	return shift, scale
}

// augment maps score combinations and residual combinations of the raw
// columns to the basis [1, b] of the cached moments:
//
//	Σ_j v_j A_j = (Σ_j v_j shift_j)·1 + Σ_j (v_j scale_j)·b_j
func (hc *hcLink) augment(w []combo, r [][]float64) ([]combo, [][]float64) {
	k := len(hc.shift)
	w2 := make([]combo, len(w))
	for a, wa := range w {
		c0 := 0.0
		out := make(combo, 0, len(wa)+1)
		for _, e := range wa {
			c0 += e.c * hc.shift[e.j]
		}
		if c0 != 0 {
			out = append(out, term{0, c0})
		}
		for _, e := range wa {
			out = append(out, term{e.j + 1, e.c * hc.scale[e.j]})
		}
		w2[a] = out
	}
	r2 := make([][]float64, len(r))
	for p, rp := range r {
		v := make([]float64, k+1)
		for j, x := range rp {
			v[0] += x * hc.shift[j]
			v[j+1] = x * hc.scale[j]
		}
		r2[p] = v
	}
	return w2, r2
}

// fourthLen returns C(k+3, 4), the number of distinct fourth-order
// moments of k columns.
func fourthLen(k int) int { return k * (k + 1) * (k + 2) * (k + 3) / 24 }

// fourthIndex returns the position of M4[j,k,l,m], j ≤ k ≤ l ≤ m, among
// the distinct entries in colexicographic order (the combinatorial number
// system applied to j < k+1 < l+2 < m+3):
//
//	idx = j + C(k+1,2) + C(l+2,3) + C(m+3,4)
//
// The position does not depend on the number of columns. The indices must
// be sorted.
func fourthIndex(j, k, l, m int) int {
	return j + (k+1)*k/2 + (l+2)*(l+1)*l/6 + (m+3)*(m+2)*(m+1)*m/24
}

// fourthMoments returns the distinct fourth-order row moments of cols,
// in the order of fourthIndex. Rows are summed in fixed chunks of
// chunkRows in parallel on workers goroutines, and the chunk sums are
// added in chunk order, so the result does not depend on workers.
//
// Within a chunk, blocks of rows form the K(K+1)/2 pair products
// p_jk = a_j∘a_k, and M4[j,k,l,m] = Σ p_jk∘p_lm: for each (l,m) the pairs
// (j,k) with k ≤ l are the first (l+1)(l+2)/2 ones, so their sums are a
// matrix-vector product.
func fourthMoments(cols [][]float64, workers int) []float64 {
	return fourthMomentsAffine(cols, nil, nil, workers)
}

// fourthMomentsAffine is fourthMoments of the K+1 columns
// [1, (A_1-shift_1)/scale_1, …, (A_K-shift_K)/scale_K] when shift and
// scale are given, and of the K raw columns when they are nil. The
// transformed columns are formed a block of rows at a time.
func fourthMomentsAffine(cols [][]float64, shift, scale []float64, workers int) []float64 {
	affine := shift != nil
	k := len(cols)
	if affine {
		k++
	}
	n := len(cols[0])
	nq := fourthLen(k)
	np := k * (k + 1) / 2
	nch := (n + chunkRows - 1) / chunkRows
	parts := make([][]float64, nch)
	next := make(chan int, nch)
	for c := 0; c < nch; c++ {
		next <- c
	}
	close(next)
	var wg sync.WaitGroup
	for g := 0; g < min(max(workers, 1), max(nch, 1)); g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			pairs := make([]float64, np*fourthBlock)
			var std [][]float64
			if affine {
				std = make([][]float64, k)
				for j := range std {
					std[j] = make([]float64, fourthBlock)
				}
				for i := range std[0] {
					std[0][i] = 1
				}
			}
			for c := range next {
				lo, hi := c*chunkRows, min((c+1)*chunkRows, n)
				acc := make([]float64, nq)
				for b0 := lo; b0 < hi; b0 += fourthBlock {
					b1 := min(b0+fourthBlock, hi)
					nb := b1 - b0
					col := func(j int) []float64 { return cols[j][b0:b1] }
					if affine {
						for j := 1; j < k; j++ {
							src, dst, sh, inv := cols[j-1][b0:b1], std[j][:nb], shift[j-1], 1/scale[j-1]
							for i, v := range src {
								dst[i] = (v - sh) * inv
							}
						}
						col = func(j int) []float64 { return std[j][:nb] }
					}
					for kk := 0; kk < k; kk++ {
						xk := col(kk)
						for j := 0; j <= kk; j++ {
							xj := col(j)
							dst := pairs[(j+kk*(kk+1)/2)*nb:][:nb]
							for i, v := range xj {
								dst[i] = v * xk[i]
							}
						}
					}
					for mm := 0; mm < k; mm++ {
						for l := 0; l <= mm; l++ {
							cnt := (l + 1) * (l + 2) / 2
							base := fourthIndex(0, 0, l, mm)
							x := pairs[(l+mm*(mm+1)/2)*nb:][:nb]
							blas64.Gemv(blas.NoTrans, 1,
								blas64.General{Rows: cnt, Cols: nb, Stride: nb, Data: pairs[:cnt*nb]},
								blas64.Vector{N: nb, Inc: 1, Data: x},
								1, blas64.Vector{N: cnt, Inc: 1, Data: acc[base : base+cnt]})
						}
					}
				}
				parts[c] = acc
			}
		}()
	}
	wg.Wait()
	out := make([]float64, nq)
	for _, p := range parts {
		for i, v := range p {
			out[i] += v
		}
	}
	return out
}

// fourthScoreCov adds into out (d×d row-major, upper triangle, d =
// len(w)·len(r)) the outer-product sum of row scores computed from the
// distinct fourth moments m4 of k columns:
//
//	S[(p,a),(q,b)] = Σ_{j,l,s,t} r_pj r_ql W_sa W_tb M4[j,l,s,t]
//
// Residuals are contracted first: R_p[k,l,m] = Σ_j r_pj M4[j,k,l,m]
// (symmetric, so computed for k ≤ l ≤ m), then Z_pa[l,m] = Σ_s W_sa R_p[s,l,m],
// y_paq[m] = Σ_l r_ql Z_pa[l,m] and S = Σ_t W_tb y_paq[t]. The cost is
// O(|r|·K⁴ + |r|²·|w|·K² + d²·K) with dense combinations, and does not
// depend on the number of rows.
func fourthScoreCov(out, m4 []float64, k int, w []combo, r [][]float64) {
	nw := len(w)
	d := nw * len(r)
	kk := k * k
	rp := make([]float64, kk*k) // R_p, K³ full
	z := make([]float64, kk)    // Z_pa
	y := make([]float64, k)
	for p, rv := range r {
		for a := 0; a < k; a++ {
			for b := a; b < k; b++ {
				for c := b; c < k; c++ {
					s := 0.0
					for j, rj := range rv {
						if rj == 0 {
							continue
						}
						var idx int
						switch {
						case j <= a:
							idx = fourthIndex(j, a, b, c)
						case j <= b:
							idx = fourthIndex(a, j, b, c)
						case j <= c:
							idx = fourthIndex(a, b, j, c)
						default:
							idx = fourthIndex(a, b, c, j)
						}
						s += rj * m4[idx]
					}
					rp[a*kk+b*k+c] = s
					rp[a*kk+c*k+b] = s
					rp[b*kk+a*k+c] = s
					rp[b*kk+c*k+a] = s
					rp[c*kk+a*k+b] = s
					rp[c*kk+b*k+a] = s
				}
			}
		}
		for ai, wa := range w {
			clear(z)
			for _, e := range wa {
				src := rp[e.j*kk : (e.j+1)*kk]
				for i, v := range src {
					z[i] += e.c * v
				}
			}
			row := out[(p*nw+ai)*d:]
			for q := p; q < len(r); q++ {
				clear(y)
				for l, rl := range r[q] {
					if rl == 0 {
						continue
					}
					zl := z[l*k : (l+1)*k]
					for t, v := range zl {
						y[t] += rl * v
					}
				}
				b0 := 0
				if q == p {
					b0 = ai
				}
				for bi := b0; bi < nw; bi++ {
					s := 0.0
					for _, e := range w[bi] {
						s += e.c * y[e.j]
					}
					row[q*nw+bi] += s
				}
			}
		}
	}
}
