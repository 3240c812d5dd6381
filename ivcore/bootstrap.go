package ivcore

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// MinBootstrapReplicates is the smallest number of replicates
// ClusterBootstrap accepts: below it the 2.5% and 97.5% percentiles of a
// 95% band rest on one or two draws each.
const MinBootstrapReplicates = 50

// maxFailedShare is the largest share of replicates that may fail (a
// singular resampled design) before ClusterBootstrap gives up.
const maxFailedShare = 0.10

// Bootstrap holds the replicates of a pairs cluster bootstrap.
type Bootstrap struct {
	// Estimator is the estimator re-run on every replicate.
	Estimator Estimator
	// Names are the regressor names, in the order of Model.X().
	Names []string
	// Coef are the full-sample estimates, in the order of Names.
	Coef []float64
	// Draws holds one row of coefficients per successful replicate, in
	// replicate order: Draws[i][j] is coefficient j in replicate Index[i].
	Draws [][]float64
	// Index is the replicate number (0-based) of each row of Draws.
	Index []int
	// Failed lists the replicates (0-based) whose resampled design was
	// singular; they are left out of Draws.
	Failed []int
	// B is the number of replicates asked for.
	B int
	// G is the number of clusters resampled, and Cluster names their
	// dimension.
	G       int
	Cluster string
	// Seed is the seed the replicates were drawn from.
	Seed uint64
	// Notes say what the bootstrap does and does not redo.
	Notes []string
}

// ClusterBootstrap runs a pairs cluster bootstrap of the k-class estimator
// est on model md, resampling the clusters of m.Clusters[dim]. Replicate r
// draws G clusters with replacement, with multiplicities w_g, and rebuilds
// the Gram matrix from the per-cluster blocks,
//
//	Gram_r = Σ_g w_g A_gᵀA_g,   Σ_g w_g = G,
//
// then re-estimates the coefficients from Gram_r exactly as Estimate does
// from the full Gram. Each replicate costs O(G·u²) for u columns in use
// (regressors, instruments and outcome) plus a u×u solve; it never reads
// the rows, so its cost does not depend on n.
//
// Replicate r draws from its own PCG generator seeded from (seed, r), and
// the draws are stored by replicate, so the result is the same for a given
// seed whatever the number of workers (0 means runtime.NumCPU()). The
// clusters drawn in replicate r depend only on the seed, r and G, so
// bootstraps of several models whose moments share one cluster coding
// (the same G and the same code for the same cluster, with empty blocks
// for clusters a model has no rows in) resample the same clusters when
// run with the same seed: their draws, matched by Index, are joint draws,
// as a cross-price matrix estimated equation by equation needs. progress,
// when not nil, is called after every finished replicate with the number
// finished so far; calls never overlap and the count never decreases.
//
// Fixed effects absorbed before accumulation are not re-estimated in each
// replicate: the blocks hold the columns after absorption, and resampling
// them is the usual approximation (exact when the absorbed effects are
// nested within the clusters, as store effects are within store clusters).
// The absorbed degrees of freedom are kept as in the full sample. Each
// replicate's n is the sum of the drawn clusters' row counts, taken from
// the cluster codes (or the full-sample n when the moments carry no codes);
// it enters only Fuller's k.
//
// ClusterBootstrap refuses B below MinBootstrapReplicates and fewer than 2
// clusters, and returns Estimate's error if the full-sample model cannot be
// fitted. Replicates whose resampled design is singular are listed in
// Failed; when more than 10% fail it returns an error. The percentile
// bands and standard errors come from Percentile and SE.
//
// Reference: Cameron, Gelbach & Miller (2008), "Bootstrap-based
// improvements for inference with clustered errors", Review of Economics
// and Statistics 90(3), 414-427 (the pairs cluster bootstrap); Efron &
// Tibshirani, An Introduction to the Bootstrap (1993), ch. 13, ISBN
// 9780412042317 (percentile intervals).
func ClusterBootstrap(m *Moments, dim int, md Model, est Estimator, B int, seed uint64, workers int, progress func(done int)) (*Bootstrap, error) {
	if len(m.Clusters) == 0 {
		return nil, errors.New("the cluster bootstrap resamples clusters, but no cluster column was given: set a cluster column (for example the store)")
	}
	if dim < 0 || dim >= len(m.Clusters) {
		panic(fmt.Sprintf("ivcore: cluster dimension %d outside [0,%d)", dim, len(m.Clusters)))
	}
	cb := m.Clusters[dim]
	G := cb.Dim.G
	if B < MinBootstrapReplicates {
		return nil, fmt.Errorf("the cluster bootstrap needs at least %d replicates, got %d: percentile bands at 95%% read the 2.5%% and 97.5%% points of the replicates, which fewer draws cannot place (999 is the usual choice)", MinBootstrapReplicates, B)
	}
	if G < 2 {
		return nil, fmt.Errorf("the cluster bootstrap needs at least 2 clusters to resample, but %q has %d: with one cluster every replicate is the full sample and the spread is zero", cb.Dim.Name, G)
	}
	if est == GMM {
		return nil, errors.New("the cluster bootstrap re-estimates k-class models (ols, 2sls, liml, fuller); two-step GMM would need its weight matrix redone in every replicate: bootstrap with --estimator 2sls, or use the GMM estimate's analytic cluster-robust band")
	}
	if est == OLS {
		md = Model{Y: md.Y, Exog: md.X()}
	}
	full, err := Estimate(m, md, est, IID)
	if err != nil {
		return nil, err
	}

	sv := newKClassSolver(m, md, est)
	packed := sv.packBlocks(cb)
	sizes := clusterSizes(cb.Dim, m.N)

	bs := &Bootstrap{
		Estimator: est, Names: full.Names, Coef: append([]float64(nil), full.Coef...),
		B: B, G: G, Cluster: cb.Dim.Name, Seed: seed,
	}
	bs.Notes = append(bs.Notes,
		fmt.Sprintf("pairs cluster bootstrap: %d replicates, each drawing %d %s clusters with replacement (seed %d)", B, G, cb.Dim.Name, seed))
	if m.AbsorbedDoF > 0 {
		bs.Notes = append(bs.Notes, "absorbed fixed effects are not re-estimated in each replicate: the columns after absorption are resampled by cluster")
	}
	if sizes == nil {
		bs.Notes = append(bs.Notes, "row counts per cluster are not known: each replicate uses the full-sample n")
	}
	if G < 30 {
		bs.Notes = append(bs.Notes, fmt.Sprintf("only %d clusters: resampling so few clusters gives unreliable bands; read them as rough", G))
	}

	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	workers = min(workers, B)
	draws := make([][]float64, B)
	ok := make([]bool, B)
	var next atomic.Int64
	var mu sync.Mutex
	done := 0
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ws := sv.workspace()
			counts := make([]int, G)
			for {
				r := int(next.Add(1) - 1)
				if r >= B {
					return
				}
				rng := rand.New(rand.NewPCG(seed, replicateStream(r)))
				clear(counts)
				for range G {
					counts[rng.IntN(G)]++
				}
				n := 0
				clear(ws.gram)
				for g, c := range counts {
					if c == 0 {
						continue
					}
					addScaled(ws.gram, packed[g*sv.np:(g+1)*sv.np], float64(c))
					if sizes != nil {
						n += c * sizes[g]
					}
				}
				if sizes == nil {
					n = m.N
				}
				b := make([]float64, len(sv.x))
				if sv.solve(ws, n, b) {
					draws[r], ok[r] = b, true
				}
				if progress != nil {
					mu.Lock()
					done++
					progress(done)
					mu.Unlock()
				}
			}
		}()
	}
	wg.Wait()

	for r := range B {
		if ok[r] {
			bs.Draws = append(bs.Draws, draws[r])
			bs.Index = append(bs.Index, r)
		} else {
			bs.Failed = append(bs.Failed, r)
		}
	}
	if f := len(bs.Failed); float64(f) > maxFailedShare*float64(B) {
		return nil, fmt.Errorf("%d of %d cluster bootstrap replicates had a singular design (a regressor or instrument with no variation, or collinear, in the resampled %s clusters): a column varies in too few clusters for the pairs bootstrap; use the analytic cluster-robust band, or drop the column", f, B, cb.Dim.Name)
	}
	if f := len(bs.Failed); f > 0 {
		bs.Notes = append(bs.Notes, fmt.Sprintf("%d of %d replicates had a singular resampled design and were left out", f, B))
	}
	return bs, nil
}

// replicateStream returns the second PCG seed of replicate r, a
// SplitMix64 scramble of r so that neighbouring replicates start far
// apart in the generator's state space.
func replicateStream(r int) uint64 {
	z := uint64(r) + 0x9e3779b97f4a7c15
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// clusterSizes counts the rows of each cluster, or returns nil when the
// dimension carries no codes for the rows.
func clusterSizes(d ClusterDim, n int) []int {
	if d.Codes == nil && len(d.Sizes) == d.G && d.G > 0 {
		return d.Sizes
	}
	if len(d.Codes) != n || n == 0 {
		return nil
	}
	s := make([]int, d.G)
	for _, c := range d.Codes {
		s[c]++
	}
	return s
}

// addScaled adds c·src to dst.
func addScaled(dst, src []float64, c float64) {
	src = src[:len(dst)]
	if c == 1 {
		for i, v := range src {
			dst[i] += v
		}
		return
	}
	for i, v := range src {
		dst[i] += c * v
	}
}

// SE returns the bootstrap standard error of each coefficient: the sample
// standard deviation of the replicate draws,
//
//	se_j = sqrt( Σ_r (b_rj - b̄_j)² / (R - 1) )
//
// over the R successful replicates.
func (b *Bootstrap) SE() []float64 {
	se := make([]float64, len(b.Names))
	for j := range se {
		se[j] = stat.StdDev(b.Column(j), nil)
	}
	return se
}

// Column returns the replicate draws of coefficient j.
func (b *Bootstrap) Column(j int) []float64 {
	x := make([]float64, len(b.Draws))
	for r, d := range b.Draws {
		x[r] = d[j]
	}
	return x
}

// Percentile returns the percentile band of every coefficient at the given
// level (for example 0.95): the (1-level)/2 and (1+level)/2 empirical
// quantiles of the replicate draws. With R = 999 draws and level 0.95 these
// are the 25th and 975th smallest draws. Percentile panics if level is not
// in (0, 1).
func (b *Bootstrap) Percentile(level float64) (lo, hi []float64) {
	if !(level > 0 && level < 1) {
		panic("ivcore: confidence level outside (0, 1)")
	}
	lo = make([]float64, len(b.Names))
	hi = make([]float64, len(b.Names))
	for j := range b.Names {
		x := b.Column(j)
		sort.Float64s(x)
		lo[j] = stat.Quantile((1-level)/2, stat.Empirical, x, nil)
		hi[j] = stat.Quantile((1+level)/2, stat.Empirical, x, nil)
	}
	return lo, hi
}

// kclassSolver re-estimates k-class coefficients from a Gram matrix on the
// u columns a model uses, held in packed upper-triangular order.
type kclassSolver struct {
	est   Estimator
	alpha float64
	cols  []int // original column of each compact column
	y     int
	x, z  []int // compact positions
	exog  []int // compact positions of the exogenous regressors
	u, np int   // columns in use and packed length u(u+1)/2
	names []string
	nz    int // instruments counted in Fuller's L (with absorbed levels)
	k     int // parameters: regressors plus absorbed levels
}

// kclassWork is one goroutine's scratch space.
type kclassWork struct {
	gram []float64 // packed Gram of the replicate
	full []float64 // u×u
	zz   []float64
	zx   []float64 // |z|×|x|, overwritten by Π
	zy   []float64
	zxc  []float64 // copy of ZᵀX
	h    []float64
	g    []float64
	d    []float64
}

func newKClassSolver(m *Moments, md Model, est Estimator) *kclassSolver {
	sv := &kclassSolver{est: est, alpha: md.FullerAlpha}
	if sv.alpha == 0 {
		sv.alpha = 1
	}
	pos := map[int]int{}
	use := func(c int) int {
		if p, ok := pos[c]; ok {
			return p
		}
		pos[c] = len(sv.cols)
		sv.cols = append(sv.cols, c)
		return pos[c]
	}
	sv.y = use(md.Y)
	for _, c := range md.X() {
		sv.x = append(sv.x, use(c))
	}
	if est != OLS {
		for _, c := range md.Z() {
			sv.z = append(sv.z, use(c))
		}
	}
	for _, c := range md.Exog {
		sv.exog = append(sv.exog, pos[c])
	}
	sv.u = len(sv.cols)
	sv.np = sv.u * (sv.u + 1) / 2
	sv.names = m.names(sv.cols)
	sv.nz = len(md.Z()) + m.AbsorbedDoF
	sv.k = len(md.X()) + m.AbsorbedDoF
	return sv
}

// packBlocks copies the used part of every cluster block into packed
// upper-triangular order, G×np.
func (sv *kclassSolver) packBlocks(cb *ClusterBlocks) []float64 {
	out := make([]float64, cb.Dim.G*sv.np)
	for g := range cb.Dim.G {
		blk := cb.Block(g)
		p := out[g*sv.np:]
		t := 0
		for i := 0; i < sv.u; i++ {
			row := blk[sv.cols[i]*cb.k:]
			for j := i; j < sv.u; j++ {
				p[t] = row[sv.cols[j]]
				t++
			}
		}
	}
	return out
}

func (sv *kclassSolver) workspace() *kclassWork {
	u, p, l := sv.u, len(sv.x), len(sv.z)
	return &kclassWork{
		gram: make([]float64, sv.np), full: make([]float64, u*u),
		zz: make([]float64, l*l), zx: make([]float64, l*p), zy: make([]float64, l),
		zxc: make([]float64, l*p), h: make([]float64, p*p), g: make([]float64, p),
		d: make([]float64, max(u, 1)),
	}
}

// solve computes the k-class coefficients from ws.gram (n rows) into b. It
// returns false when the resampled design is singular.
func (sv *kclassSolver) solve(ws *kclassWork, n int, b []float64) bool {
	u := sv.u
	t := 0
	for i := 0; i < u; i++ {
		for j := i; j < u; j++ {
			ws.full[i*u+j] = ws.gram[t]
			ws.full[j*u+i] = ws.gram[t]
			t++
		}
	}
	a := func(i, j int) float64 { return ws.full[i*u+j] }
	p, l := len(sv.x), len(sv.z)
	if n <= sv.k {
		return false
	}
	kappa := 0.0
	switch sv.est {
	case TSLS:
		kappa = 1
	case LIML, Fuller:
		kv, ok := sv.limlKappa(ws.full, n)
		if !ok {
			return false
		}
		kappa = kv
		if sv.est == Fuller {
			if n <= sv.nz {
				return false
			}
			kappa -= sv.alpha / float64(n-sv.nz)
		}
	}
	for i, xi := range sv.x {
		for j, xj := range sv.x {
			ws.h[i*p+j] = (1 - kappa) * a(xi, xj)
		}
		ws.g[i] = (1 - kappa) * a(xi, sv.y)
	}
	if kappa != 0 {
		// Π = (ZᵀZ)⁻¹ZᵀX and Πᵀ Zᵀy; XᵀP_Z X = (ZᵀX)ᵀΠ.
		for i, zi := range sv.z {
			for j, zj := range sv.z {
				ws.zz[i*l+j] = a(zi, zj)
			}
			for j, xj := range sv.x {
				ws.zx[i*p+j] = a(zi, xj)
			}
			ws.zy[i] = a(zi, sv.y)
		}
		copy(ws.zxc, ws.zx) // keep ZᵀX
		if !scaledCholSolve(ws.zz, l, ws.zx, p, ws.d) {
			return false
		}
		for i := 0; i < p; i++ {
			for j := 0; j < p; j++ {
				s := 0.0
				for r := 0; r < l; r++ {
					s += ws.zxc[r*p+i] * ws.zx[r*p+j]
				}
				ws.h[i*p+j] += kappa * s
			}
			s := 0.0
			for r := 0; r < l; r++ {
				s += ws.zx[r*p+i] * ws.zy[r]
			}
			ws.g[i] += kappa * s
		}
		// Symmetrize H against rounding.
		for i := 0; i < p; i++ {
			for j := i + 1; j < p; j++ {
				v := (ws.h[i*p+j] + ws.h[j*p+i]) / 2
				ws.h[i*p+j], ws.h[j*p+i] = v, v
			}
		}
	}
	copy(b, ws.g)
	return scaledCholSolve(ws.h, p, b, 1, ws.d)
}

// limlKappa returns the LIML root from the u×u Gram a (see limlKappa in
// kclass.go), through a Moments value on the used columns.
func (sv *kclassSolver) limlKappa(a []float64, n int) (float64, bool) {
	sym := mat.NewSymDense(sv.u, append([]float64(nil), a...))
	mm := &Moments{Names: sv.names, N: n, Gram: sym}
	md := Model{Y: sv.y, Exog: sv.exog}
	for _, c := range sv.x {
		if !contains(sv.exog, c) {
			md.Endog = append(md.Endog, c)
		}
	}
	for _, c := range sv.z {
		if !contains(sv.exog, c) {
			md.Instr = append(md.Instr, c)
		}
	}
	k, err := limlKappa(mm, md)
	return k, err == nil && !math.IsNaN(k)
}

func contains(s []int, v int) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// scaledCholSolve solves A X = B in place for a symmetric positive definite
// n×n matrix a (overwritten by its factor) and an n×m right-hand side b
// (overwritten by X). A is scaled to unit diagonal first, A = D C D, and
// the factorisation fails, returning false, when a pivot of C falls below
// RankTol (a column explained by the earlier ones, as in checkRank). d is
// scratch of length at least n.
func scaledCholSolve(a []float64, n int, b []float64, m int, d []float64) bool {
	for i := 0; i < n; i++ {
		v := a[i*n+i]
		if !(v > 0) || math.IsInf(v, 0) {
			return false
		}
		d[i] = math.Sqrt(v)
	}
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			a[i*n+j] /= d[i] * d[j]
		}
	}
	// Cholesky C = L Lᵀ, L stored in the lower triangle.
	for j := 0; j < n; j++ {
		s := a[j*n+j]
		for k := 0; k < j; k++ {
			s -= a[j*n+k] * a[j*n+k]
		}
		if !(s >= RankTol) {
			return false
		}
		ljj := math.Sqrt(s)
		a[j*n+j] = ljj
		for i := j + 1; i < n; i++ {
			s := a[i*n+j]
			for k := 0; k < j; k++ {
				s -= a[i*n+k] * a[j*n+k]
			}
			a[i*n+j] = s / ljj
		}
	}
	for c := 0; c < m; c++ {
		// Forward: L y = D⁻¹ b.
		for i := 0; i < n; i++ {
			s := b[i*m+c] / d[i]
			for k := 0; k < i; k++ {
				s -= a[i*n+k] * b[k*m+c]
			}
			b[i*m+c] = s / a[i*n+i]
		}
		// Backward: Lᵀ z = y, then x = D⁻¹ z.
		for i := n - 1; i >= 0; i-- {
			s := b[i*m+c]
			for k := i + 1; k < n; k++ {
				s -= a[k*n+i] * b[k*m+c]
			}
			b[i*m+c] = s / a[i*n+i]
		}
		for i := 0; i < n; i++ {
			b[i*m+c] /= d[i]
		}
	}
	return true
}
