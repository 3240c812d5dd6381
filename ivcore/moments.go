package ivcore

import (
	"fmt"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// ClusterDim is one clustering dimension: a cluster code for every row.
type ClusterDim struct {
	// Name labels the dimension in output ("store", "store×week").
	Name string
	// Codes has one entry per row, in [0, G).
	Codes []int32
	// G is the number of clusters.
	G int
	// NestedDoF is the number of absorbed fixed-effect parameters that
	// belong to effects nested within this clustering dimension. They are
	// left out of k in the small-sample factor of the cluster covariance.
	NestedDoF int
	// Sizes, when Codes is nil, holds the number of rows in each cluster
	// (moments computed elsewhere); nil when unknown.
	Sizes []int
}

// ClusterBlocks holds the per-cluster Gram matrices of one dimension:
// Block(g) = Σ_{i∈g} a_i a_iᵀ over the columns of the Moments value.
type ClusterBlocks struct {
	Dim  ClusterDim
	data []float64 // G × K × K, row-major within each block
	k    int
}

// Block returns a view of cluster g's K×K cross-product matrix. The slice
// must not be modified.
func (c *ClusterBlocks) Block(g int) []float64 {
	kk := c.k * c.k
	return c.data[g*kk : (g+1)*kk]
}

// Moments holds the cross-products of a set of named columns.
type Moments struct {
	// Names are the column names, in order.
	Names []string
	// N is the number of rows.
	N int
	// Gram is AᵀA.
	Gram *mat.SymDense
	// Clusters holds the per-cluster blocks for each clustering
	// dimension passed to Accumulate. For two-way clustering the caller
	// passes three dimensions: the two ways and their intersection.
	Clusters []*ClusterBlocks
	// AbsorbedDoF is the number of parameters absorbed as fixed effects
	// before accumulation (0 when none). It enters k in n-k.
	AbsorbedDoF int
	// Scale holds, for each column, Σ x² of the column before fixed
	// effects were absorbed (or nil). A column whose absorbed Σ x² is a
	// negligible fraction of its Scale had no variation beyond the fixed
	// effects.
	Scale []float64
	// Cols are the accumulated columns themselves, kept for statistics
	// that need one more pass over the rows (HC1). Nil when the moments
	// came from elsewhere (a database, a file of sums).
	Cols [][]float64

	// hc ties the value to the rows of its HC1 statistics (fourth.go).
	hc *hcLink
}

// chunkRows is the number of rows each unit of parallel work sums. Partial
// sums are combined in chunk order, so results do not depend on the number
// of goroutines.
const chunkRows = 1 << 14

// Accumulate computes the moment blocks of cols in one pass over the rows
// per clustering dimension:
//
//	Gram = Σ_i a_i a_iᵀ,   Block_g = Σ_{i∈g} a_i a_iᵀ
//
// where a_i = (cols[0][i], …, cols[K-1][i]). Work is split across workers
// goroutines (0 means runtime.NumCPU()) and merged by addition in a fixed
// order, so the result is the same for any number of workers. Accumulate
// panics if the columns or cluster codes differ in length.
func Accumulate(cols [][]float64, names []string, clusters []ClusterDim, workers int) *Moments {
	k := len(cols)
	if k == 0 {
		panic("ivcore: no columns to accumulate")
	}
	if len(names) != k {
		panic("ivcore: names and columns differ in number")
	}
	n := 0
	if k > 0 {
		n = len(cols[0])
	}
	for _, c := range cols {
		if len(c) != n {
			panic("ivcore: columns differ in length")
		}
	}
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	m := &Moments{Names: append([]string(nil), names...), N: n, Cols: cols, hc: &hcLink{}}
	m.Gram = gramChunked(cols, n, workers)
	for _, d := range clusters {
		if len(d.Codes) != n {
			panic("ivcore: cluster codes differ in length from the columns")
		}
		m.Clusters = append(m.Clusters, clusterBlocks(cols, d, workers))
	}
	return m
}

// gramChunked sums a_i a_iᵀ in fixed chunks of rows, in parallel.
func gramChunked(cols [][]float64, n, workers int) *mat.SymDense {
	k := len(cols)
	nch := (n + chunkRows - 1) / chunkRows
	parts := make([][]float64, nch)
	var wg sync.WaitGroup
	next := make(chan int, nch)
	for c := 0; c < nch; c++ {
		next <- c
	}
	close(next)
	for w := 0; w < min(workers, max(nch, 1)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for c := range next {
				lo, hi := c*chunkRows, min((c+1)*chunkRows, n)
				p := make([]float64, k*k)
				for a := 0; a < k; a++ {
					xa := cols[a][lo:hi]
					for b := a; b < k; b++ {
						p[a*k+b] = dot(xa, cols[b][lo:hi])
					}
				}
				parts[c] = p
			}
		}()
	}
	wg.Wait()
	g := mat.NewSymDense(k, nil)
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			s := 0.0
			for _, p := range parts {
				s += p[a*k+b]
			}
			g.SetSym(a, b, s)
		}
	}
	return g
}

// dot is a four-way unrolled dot product.
func dot(x, y []float64) float64 {
	y = y[:len(x)]
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		s0 += x[i] * y[i]
		s1 += x[i+1] * y[i+1]
		s2 += x[i+2] * y[i+2]
		s3 += x[i+3] * y[i+3]
	}
	for ; i < len(x); i++ {
		s0 += x[i] * y[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// clusterBlocks sums a_i a_iᵀ within each cluster. Rows are ordered by
// cluster with a counting sort, and clusters are split across workers, so
// each block is summed in row order by one goroutine.
func clusterBlocks(cols [][]float64, d ClusterDim, workers int) *ClusterBlocks {
	k := len(cols)
	n := len(d.Codes)
	start := make([]int, d.G+1)
	for _, c := range d.Codes {
		if c < 0 || int(c) >= d.G {
			panic(fmt.Sprintf("ivcore: cluster code %d outside [0,%d)", c, d.G))
		}
		start[c+1]++
	}
	for g := 0; g < d.G; g++ {
		start[g+1] += start[g]
	}
	order := make([]int32, n)
	pos := append([]int(nil), start[:d.G]...)
	for i, c := range d.Codes {
		order[pos[c]] = int32(i)
		pos[c]++
	}
	kk := k * k
	cb := &ClusterBlocks{Dim: d, data: make([]float64, d.G*kk), k: k}
	var wg sync.WaitGroup
	per := (d.G + workers - 1) / max(workers, 1)
	for w := 0; w < workers; w++ {
		g0, g1 := w*per, min((w+1)*per, d.G)
		if g0 >= g1 {
			break
		}
		wg.Add(1)
		go func(g0, g1 int) {
			defer wg.Done()
			a := make([]float64, k)
			for g := g0; g < g1; g++ {
				blk := cb.data[g*kk : (g+1)*kk]
				for _, i := range order[start[g]:start[g+1]] {
					for j := 0; j < k; j++ {
						a[j] = cols[j][i]
					}
					for r := 0; r < k; r++ {
						ar := a[r]
						row := blk[r*k:]
						for c := r; c < k; c++ {
							row[c] += ar * a[c]
						}
					}
				}
				for r := 0; r < k; r++ {
					for c := 0; c < r; c++ {
						blk[r*k+c] = blk[c*k+r]
					}
				}
			}
		}(g0, g1)
	}
	wg.Wait()
	return cb
}

// Index returns the position of the named column, or -1.
func (m *Moments) Index(name string) int {
	for i, s := range m.Names {
		if s == name {
			return i
		}
	}
	return -1
}

// sub returns the submatrix of the Gram with rows r and columns c; both
// must be non-empty.
func (m *Moments) sub(r, c []int) *mat.Dense {
	d := mat.NewDense(len(r), len(c), nil)
	for i, a := range r {
		for j, b := range c {
			d.Set(i, j, m.Gram.At(a, b))
		}
	}
	return d
}

// subSym returns the symmetric submatrix of the Gram on columns idx, which
// must be non-empty.
func (m *Moments) subSym(idx []int) *mat.SymDense {
	s := mat.NewSymDense(len(idx), nil)
	for i, a := range idx {
		for j := i; j < len(idx); j++ {
			s.SetSym(i, j, m.Gram.At(a, idx[j]))
		}
	}
	return s
}
