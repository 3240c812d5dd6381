package ivcore

import (
	"fmt"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// Transform returns the moments of the new columns A·T, where A are the
// columns of m and T is a K×K' matrix (K = len(m.Names)), without a pass
// over the rows:
//
//	Gram' = Tᵀ Gram T,   Block'_g = Tᵀ Block_g T   (every cluster g)
//
// Column j' of the result is Σ_l T[l,j'] A_l, named names[j']. N,
// AbsorbedDoF and the clustering dimensions carry over. A column of T that
// is a unit vector (a single 1) copies an original column: it keeps that
// column's Scale and, when rows are formed, shares its storage. Other
// columns get Scale 0, so the variation check only rejects an exact zero
// for them (their sum of squares before absorption is unknown).
//
// The result remembers m (or, when m was itself made by Transform, the
// value holding the rows) and T, so its HC1 statistics need no rows of
// its own: ScoreCov with dim < 0 maps the score columns and residuals
// through T to combinations of the original columns and contracts their
// cached fourth-order row moments (see ScoreCov), so that the original
// value and everything derived from it share one pass over the rows.
// ScoreCov returns ErrNoRows only when the original value has no rows.
//
// When withCols is true and m.Cols is not nil, Cols of the result is
// formed as well, in one pass over the rows, for callers that want the
// transformed rows themselves; otherwise it is nil. HC1 statistics do not
// need it.
//
// A typical use adds combinations of existing columns as new regressors:
// T = [I | t₁ … t_p] keeps every column and appends A t₁, …, A t_p, such as
// first-stage residuals for a control-function regression.
//
// Transform panics if T does not have K rows or names does not have K'
// entries.
func (m *Moments) Transform(t mat.Matrix, names []string, withCols bool) *Moments {
	k := len(m.Names)
	r, kp := t.Dims()
	if r != k {
		panic(fmt.Sprintf("ivcore: Transform matrix has %d rows for %d columns", r, k))
	}
	if len(names) != kp {
		panic(fmt.Sprintf("ivcore: Transform has %d names for %d new columns", len(names), kp))
	}
	// Non-zero entries of each column of T.
	type entry struct {
		l int
		w float64
	}
	nz := make([][]entry, kp)
	unit := make([]int, kp)
	for j := 0; j < kp; j++ {
		for l := 0; l < k; l++ {
			if w := t.At(l, j); w != 0 {
				nz[j] = append(nz[j], entry{l, w})
			}
		}
		unit[j] = -1
		if len(nz[j]) == 1 && nz[j][0].w == 1 {
			unit[j] = nz[j][0].l
		}
	}

	// transformBlock writes Tᵀ B T (kp×kp, row-major) for a K×K row-major
	// block b, using tmp (K×kp) as scratch.
	transformBlock := func(dst, b, tmp []float64) {
		for i := 0; i < k; i++ {
			row := b[i*k : i*k+k]
			for j := 0; j < kp; j++ {
				s := 0.0
				for _, e := range nz[j] {
					s += row[e.l] * e.w
				}
				tmp[i*kp+j] = s
			}
		}
		for a := 0; a < kp; a++ {
			for c := a; c < kp; c++ {
				s := 0.0
				for _, e := range nz[a] {
					s += e.w * tmp[e.l*kp+c]
				}
				dst[a*kp+c] = s
				dst[c*kp+a] = s
			}
		}
	}

	out := &Moments{Names: append([]string(nil), names...), N: m.N, AbsorbedDoF: m.AbsorbedDoF}
	src, tm, hc := m.rowSource()
	link := &hcLink{parent: src, t: make([]float64, len(src.Names)*kp)}
	if tm == nil {
		for l := 0; l < k; l++ {
			for j := 0; j < kp; j++ {
				link.t[l*kp+j] = t.At(l, j)
			}
		}
	} else {
		// Compose with m's own map: A_src tm T.
		for l := range src.Names {
			row := tm[l*k : (l+1)*k]
			for j := 0; j < kp; j++ {
				v := 0.0
				for _, e := range nz[j] {
					v += row[e.l] * e.w
				}
				link.t[l*kp+j] = v
			}
		}
	}
	out.hc = link
	g := make([]float64, k*k)
	for i := 0; i < k; i++ {
		for j := 0; j < k; j++ {
			g[i*k+j] = m.Gram.At(i, j)
		}
	}
	gp := make([]float64, kp*kp)
	transformBlock(gp, g, make([]float64, k*kp))
	out.Gram = mat.NewSymDense(kp, gp)

	if m.Scale != nil {
		out.Scale = make([]float64, kp)
		for j, l := range unit {
			if l >= 0 {
				out.Scale[j] = m.Scale[l]
			}
		}
	}

	workers := runtime.NumCPU()
	for _, cb := range m.Clusters {
		G := cb.Dim.G
		nb := &ClusterBlocks{Dim: cb.Dim, data: make([]float64, G*kp*kp), k: kp}
		per := (G + workers - 1) / workers
		var wg sync.WaitGroup
		for w := 0; w < workers; w++ {
			g0, g1 := w*per, min((w+1)*per, G)
			if g0 >= g1 {
				break
			}
			wg.Add(1)
			go func(g0, g1 int) {
				defer wg.Done()
				tmp := make([]float64, k*kp)
				for g := g0; g < g1; g++ {
					transformBlock(nb.data[g*kp*kp:(g+1)*kp*kp], cb.Block(g), tmp)
				}
			}(g0, g1)
		}
		wg.Wait()
		out.Clusters = append(out.Clusters, nb)
	}

	if withCols && m.Cols != nil {
		hc.passes.Add(1)
		out.Cols = make([][]float64, kp)
		for j := range out.Cols {
			if l := unit[j]; l >= 0 {
				out.Cols[j] = m.Cols[l]
				continue
			}
			out.Cols[j] = make([]float64, m.N)
		}
		nch := (m.N + chunkRows - 1) / chunkRows
		next := make(chan int, nch)
		for c := 0; c < nch; c++ {
			next <- c
		}
		close(next)
		var wg sync.WaitGroup
		for w := 0; w < min(workers, max(nch, 1)); w++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for c := range next {
					lo, hi := c*chunkRows, min((c+1)*chunkRows, m.N)
					for j, col := range out.Cols {
						if unit[j] >= 0 {
							continue
						}
						dst := col[lo:hi]
						for _, e := range nz[j] {
							src := m.Cols[e.l][lo:hi]
							for i, v := range src {
								dst[i] += e.w * v
							}
						}
					}
				}
			}()
		}
		wg.Wait()
	}
	return out
}
