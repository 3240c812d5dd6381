package ivcore

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"
	"sync/atomic"
)

// Effect is one categorical variable to absorb. Codes[i] is the level of
// row i and must lie in [0, Levels) for every row: there are no missing
// codes, the caller drops those rows first. Levels with no rows are
// allowed and ignored.
type Effect struct {
	// Name labels the effect in output ("product×store", "week").
	Name string
	// Codes has one entry per row, in [0, Levels).
	Codes []int32
	// Levels is the number of possible codes.
	Levels int
}

// AbsorbOptions controls Absorb. The zero value gives the defaults.
type AbsorbOptions struct {
	// Tol is the convergence tolerance. A column has converged when the
	// largest change that one sweep makes to any of its residuals,
	// divided by the column's scale, is at most Tol. The scale is the
	// standard deviation of the original column about its mean (so Tol is
	// a fraction of the column's spread, whatever its units); see Absorb
	// for how the change is measured. Zero means 1e-10. Must not be
	// negative.
	Tol float64
	// MaxIter is the largest number of sweeps per column. Zero means
	// 10000. Must not be negative.
	MaxIter int
	// Workers is the number of goroutines; columns are absorbed in
	// parallel, one column per goroutine at a time. Zero means
	// runtime.NumCPU(). Must not be negative.
	Workers int
}

// EffectInfo describes one absorbed effect.
type EffectInfo struct {
	Name string
	// Levels is the number of levels that occur in the rows (levels
	// without rows are not parameters and are not counted).
	Levels int
	// Redundant is the number of levels not counted in the degrees of
	// freedom because they are collinear with earlier effects.
	Redundant int
}

// Absorption reports what Absorb did.
type Absorption struct {
	// Effects describes each absorbed effect, in the order given.
	Effects []EffectInfo
	// DoF is the number of absorbed parameters:
	//
	//	DoF = Σ_k (Effects[k].Levels - Effects[k].Redundant)
	DoF int
	// Iterations is the largest number of sweeps any column needed.
	Iterations int
	// Converged is true when every column met the tolerance.
	Converged bool
	// Tol is the tolerance used.
	Tol float64
	// MaxChange is the final relative change (change / scale) of the
	// worst column.
	MaxChange float64
	// Method names the algorithm used.
	Method string
}

// NotConvergedError is returned by Absorb when a column did not meet the
// tolerance within the sweep limit. The residuals of the last sweep are
// still written to the destination.
type NotConvergedError struct {
	// Column is the index (into cols) of the first column that did not
	// converge.
	Column int
	// Iterations is the number of sweeps made.
	Iterations int
	// MaxChange is the relative change of the last sweep, to compare
	// with Tol.
	MaxChange, Tol float64
}

func (e *NotConvergedError) Error() string {
	sweeps := "sweeps"
	if e.Iterations == 1 {
		sweeps = "sweep"
	}
	return fmt.Sprintf("ivcore: absorbing the fixed effects did not converge for column %d after %d %s: "+
		"the last sweep still moved the residuals by %.3g of the column's standard deviation, above the tolerance %.3g; "+
		"raise the sweep limit (--max-sweeps), loosen the tolerance, or look for effects with very many levels "+
		"that are joined by few rows (for example products sold in only one or two weeks), and drop or merge them",
		e.Column, e.Iterations, sweeps, e.MaxChange, e.Tol)
}

const (
	feDefaultTol     = 1e-10
	feDefaultMaxIter = 10000
	// feRoundoff bounds the change that rounding alone can cause, as a
	// fraction of the largest centred value of the column.
	feRoundoff = 64 * 0x1p-52

	feMethodNone  = "none (no effects to absorb)"
	feMethodOne   = "exact subtraction of level means (one effect)"
	feMethodMulti = "alternating projections (Gauss-Seidel sweeps over the effects' level means) " +
		"with Irons-Tuck extrapolation every second sweep"
)

// Absorb writes into dst[j] the column cols[j] with all effects projected
// out: the residual of the least-squares regression of cols[j] on the
// dummy variables of every level of every effect (the within
// transformation),
//
//	r = y - D a,   a = argmin ‖y - D a‖²,   D = [D_1 | D_2 | … | D_K]
//
// where D_k is the N×Levels_k indicator matrix of effect k.
//
// With one effect this is the exact subtraction of level means. With two
// or more, the coefficients a_k are found by alternating projections
// (block Gauss-Seidel): one sweep sets, for k = 1…K in turn,
//
//	a_k[l] = mean over rows i in level l of ( y_i - Σ_{j≠k} a_j[c_j(i)] )
//
// using the newest values of the other effects. Because a_1 is fully
// determined by a_2…a_K, one sweep is a map G on (a_2, …, a_K) whose fixed
// point gives the projection (Guimarães & Portugal 2010; Gaure 2013, who
// shows it is the method of alternating projections of von Neumann and
// Halperin). The level sums Σ_{i∈l} y_i are computed once per column, and
// every pair of effects is cross-tabulated once for all columns, B_kj[l, m]
// being the number of rows in level l of effect k and level m of effect j.
// A sweep is then a sparse matrix-vector product per pair,
//
//	a_k = (Σ_{i∈l} y_i - Σ_{j≠k} B_kj a_j) / n_k
//
// whose cost is the number of distinct (l, m) cells, at most N, and which
// never touches y. The cross-tabulations take about 4·K·(K-1) bytes per
// distinct cell (12·K·(K-1) when some cells hold several rows). Every second
// sweep is followed by an Irons-Tuck extrapolation of the state X from
// X, G(X) and G(G(X)):
//
//	δ = G(G(X)) - G(X),   δ² = G(G(X)) - 2 G(X) + X
//	X ← G(G(X)) - (⟨δ, δ²⟩ / ⟨δ², δ²⟩) δ
//
// (Irons & Tuck 1969, as presented by Ramière & Helfer 2015 and applied to
// fixed effects by Bergé 2018).
//
// Convergence is checked after each pair of plain sweeps. The change is
//
//	Δ = Σ_k max_l |a_k[l] after the second sweep - a_k[l] after the first|
//
// which bounds the largest change of any residual between the two sweeps.
// A column has converged when Δ ≤ Tol·s, where s is the standard deviation
// of the original column about its mean, or when Δ ≤ 64·ε·max_i |y_i - ȳ|
// (ε the float64 machine epsilon): the change is then at the level of
// rounding and cannot shrink further. A constant column is written as
// zeros without sweeps (the effects absorb a constant exactly). When the
// sweeps contract slowly, at a rate ρ close to 1 (effects whose levels are
// joined by few rows), the distance to the exact residuals is about
// Δ/(1-ρ), larger than Δ: tighten Tol for such designs.
//
// Columns are absorbed in parallel, each by one goroutine from start to
// end, so the result for a column is the same bit for bit whatever the
// number of workers.
//
// cols are never modified, except that dst[j] may be the same slice as
// cols[j] to absorb in place. dst must have len(cols) entries; a nil
// dst[j] is allocated. Absorb panics if dst and cols differ in number, if
// a column, destination or effect's Codes differ in length, or if a code
// lies outside [0, Levels). It returns an error if a column holds NaN or
// ±Inf, if the options are negative, and a *NotConvergedError (with the
// Absorption and the residuals of the last sweep) if MaxIter is reached.
//
// References:
//
// Guimarães, P. and Portugal, P. (2010). A simple feasible procedure to fit
// models with high-dimensional fixed effects. Stata Journal 10(4), 628-649.
//
// Gaure, S. (2013). OLS with multiple high dimensional category variables.
// Computational Statistics & Data Analysis 66, 8-18.
//
// Irons, B. M. and Tuck, R. C. (1969). A version of the Aitken accelerator
// for computer iteration. International Journal for Numerical Methods in
// Engineering 1(3), 275-277.
//
// Ramière, I. and Helfer, T. (2015). Iterative residual-based vector
// methods to accelerate fixed point iterations. Computers & Mathematics
// with Applications 70(9), 2210-2226.
//
// Bergé, L. (2018). Efficient estimation of maximum likelihood models with
// multiple fixed-effects: the R package FENmlm. CREA Discussion Paper
// 2018-13, University of Luxembourg.
func Absorb(dst, cols [][]float64, effects []Effect, opts AbsorbOptions) (*Absorption, error) {
	if len(dst) != len(cols) {
		panic(fmt.Sprintf("ivcore: Absorb has %d destinations for %d columns", len(dst), len(cols)))
	}
	n := -1
	if len(cols) > 0 {
		n = len(cols[0])
	} else if len(effects) > 0 {
		n = len(effects[0].Codes)
	}
	for j, c := range cols {
		if len(c) != n {
			panic(fmt.Sprintf("ivcore: column %d has %d rows, column 0 has %d", j, len(c), n))
		}
		if dst[j] != nil && len(dst[j]) != n {
			panic(fmt.Sprintf("ivcore: destination %d has %d rows, the columns have %d", j, len(dst[j]), n))
		}
	}
	if n < 0 {
		n = 0
	}
	feCheckEffects(effects, n)

	tol, maxIter, workers := opts.Tol, opts.MaxIter, opts.Workers
	switch {
	case math.IsNaN(tol) || tol < 0:
		return nil, fmt.Errorf("ivcore: absorption tolerance is %v; it must be zero (default 1e-10) or positive", tol)
	case maxIter < 0:
		return nil, fmt.Errorf("ivcore: absorption sweep limit is %d; it must be zero (default 10000) or positive", maxIter)
	case workers < 0:
		return nil, fmt.Errorf("ivcore: absorption worker count is %d; it must be zero (one per CPU) or positive", workers)
	}
	if tol == 0 {
		tol = feDefaultTol
	}
	if maxIter == 0 {
		maxIter = feDefaultMaxIter
	}
	if workers == 0 {
		workers = runtime.NumCPU()
	}

	for j := range dst {
		if dst[j] == nil {
			dst[j] = make([]float64, n)
		}
	}

	info, dof := feDoF(effects, n)
	abs := &Absorption{Effects: info, DoF: dof, Converged: true, Tol: tol}
	switch len(effects) {
	case 0:
		abs.Method = feMethodNone
	case 1:
		abs.Method = feMethodOne
	default:
		abs.Method = feMethodMulti
	}
	if len(cols) == 0 {
		return abs, nil
	}

	plan := newFEPlan(effects, n, workers)
	res := make([]feResult, len(cols))
	if workers > len(cols) {
		workers = len(cols)
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := plan.newScratch()
			for {
				j := int(next.Add(1)) - 1
				if j >= len(cols) {
					return
				}
				res[j] = plan.absorbColumn(dst[j], cols[j], j, s, tol, maxIter)
			}
		}()
	}
	wg.Wait()

	for _, r := range res {
		if r.err != nil {
			return nil, r.err
		}
	}
	firstFail := -1
	for j, r := range res {
		abs.Iterations = max(abs.Iterations, r.sweeps)
		abs.MaxChange = max(abs.MaxChange, r.change)
		if !r.converged && firstFail < 0 {
			firstFail = j
		}
	}
	if firstFail >= 0 {
		abs.Converged = false
		r := res[firstFail]
		return abs, &NotConvergedError{Column: firstFail, Iterations: r.sweeps, MaxChange: r.change, Tol: tol}
	}
	return abs, nil
}

// feCheckEffects panics if an effect's codes differ in length from n or
// lie outside [0, Levels).
func feCheckEffects(effects []Effect, n int) {
	for k, e := range effects {
		if len(e.Codes) != n {
			panic(fmt.Sprintf("ivcore: effect %d (%q) has %d codes for %d rows", k, e.Name, len(e.Codes), n))
		}
		if e.Levels < 0 || int64(e.Levels) > math.MaxInt32+1 {
			panic(fmt.Sprintf("ivcore: effect %d (%q) has %d levels", k, e.Name, e.Levels))
		}
		lv := int32(e.Levels - 1) // e.Levels ≤ 2³¹, so no overflow
		for i, c := range e.Codes {
			if c < 0 || c > lv {
				panic(fmt.Sprintf("ivcore: effect %d (%q) has code %d at row %d, outside [0, %d): drop rows with missing codes before absorbing",
					k, e.Name, c, i, e.Levels))
			}
		}
	}
}

// fePlan holds what all columns share: the codes, the reciprocal level
// counts of each effect and, with two or more effects, the cross-tabulation
// of every pair of effects.
type fePlan struct {
	codes  [][]int32
	inv    [][]float64 // 1/count per level, 0 for levels without rows
	cross  [][]*feCross
	off    []int // offset of effect k≥1 in the state vector
	state  int   // Σ_{k≥1} Levels_k
	maxLev int
}

// feCross is the cross-tabulation B_kj of effect k (rows) against effect
// j (columns) in compressed sparse row form: B_kj[l, m] is the number of
// rows with level l of effect k and level m of effect j. Row l holds the
// entries ptr[l] ≤ p < ptr[l+1], with column idx[p] and count w[p] (w is
// nil when every count is 1, the usual case for a panel without duplicate
// cells). Entries of a row are in order of first appearance in the data
// for k < j, and in increasing order for k > j (built by transposition).
type feCross struct {
	ptr []int
	idx []int32
	w   []float64
}

// feResult is the outcome for one column.
type feResult struct {
	sweeps    int
	change    float64 // relative change of the last checked sweep
	converged bool
	err       error
}

func newFEPlan(effects []Effect, n, workers int) *fePlan {
	k := len(effects)
	p := &fePlan{codes: make([][]int32, k), inv: make([][]float64, k), off: make([]int, k)}
	for j, e := range effects {
		p.codes[j] = e.Codes
		p.maxLev = max(p.maxLev, e.Levels)
		if j >= 1 {
			p.off[j] = p.state
			p.state += e.Levels
		}
	}
	if k < 2 {
		if k == 1 {
			p.inv[0] = feInvCounts(effects[0])
		}
		return p
	}
	if n > math.MaxInt32 {
		panic(fmt.Sprintf("ivcore: %d rows; absorbing two or more effects supports at most %d", n, math.MaxInt32))
	}
	p.cross = make([][]*feCross, k)
	var wg sync.WaitGroup
	sem := make(chan struct{}, max(workers, 1))
	for j := range effects {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			p.inv[j] = feInvCounts(effects[j])
			p.cross[j] = feCrossTabs(effects, j)
		}()
	}
	wg.Wait()
	for j := range effects {
		for e := j + 1; e < k; e++ {
			wg.Add(1)
			sem <- struct{}{}
			go func() {
				defer func() { <-sem; wg.Done() }()
				p.cross[e][j] = feTranspose(p.cross[j][e], effects[e].Levels)
			}()
		}
	}
	wg.Wait()
	return p
}

// feInvCounts returns 1/count of each level of e (0 for empty levels).
func feInvCounts(e Effect) []float64 {
	cnt := make([]float64, e.Levels)
	for _, c := range e.Codes {
		cnt[c]++
	}
	for l, v := range cnt {
		if v > 0 {
			cnt[l] = 1 / v
		}
	}
	return cnt
}

// feCrossTabs builds B_kj for every j > k by a counting sort of the rows
// on effect k's codes (skipped when the rows are already in that order);
// B_jk is built later as its transpose (feTranspose).
func feCrossTabs(effects []Effect, k int) []*feCross {
	ek := effects[k]
	out := make([]*feCross, len(effects))
	if k == len(effects)-1 {
		return out
	}
	start := make([]int, ek.Levels+1)
	for _, c := range ek.Codes {
		start[c+1]++
	}
	for l := 1; l <= ek.Levels; l++ {
		start[l] += start[l-1]
	}
	var perm []int32 // rows in order of effect k's codes; nil: already so
	if !slices.IsSorted(ek.Codes) {
		perm = make([]int32, len(ek.Codes))
		fill := slices.Clone(start[:ek.Levels])
		for i, c := range ek.Codes {
			perm[fill[c]] = int32(i)
			fill[c]++
		}
	}
	for j := k + 1; j < len(effects); j++ {
		ej := effects[j]
		cj := ej.Codes
		mark := make([]int32, ej.Levels)
		pos := make([]int, ej.Levels)
		ptr := make([]int, ek.Levels+1)
		// Count the distinct cells of each level of effect k.
		for m := range mark {
			mark[m] = -1
		}
		dup := false
		for l := 0; l < ek.Levels; l++ {
			d := 0
			for i := start[l]; i < start[l+1]; i++ {
				row := i
				if perm != nil {
					row = int(perm[i])
				}
				if m := cj[row]; mark[m] != int32(l) {
					mark[m] = int32(l)
					d++
				} else {
					dup = true
				}
			}
			ptr[l+1] = ptr[l] + d
		}
		// Fill the cells and, when some cell holds several rows, counts.
		x := &feCross{ptr: ptr, idx: make([]int32, ptr[ek.Levels])}
		if dup {
			x.w = make([]float64, ptr[ek.Levels])
		}
		for m := range mark {
			mark[m] = -1
		}
		for l := 0; l < ek.Levels; l++ {
			q := ptr[l]
			for i := start[l]; i < start[l+1]; i++ {
				row := i
				if perm != nil {
					row = int(perm[i])
				}
				m := cj[row]
				if mark[m] != int32(l) {
					mark[m] = int32(l)
					pos[m] = q
					x.idx[q] = m
					if dup {
						x.w[q] = 1
					}
					q++
				} else {
					x.w[pos[m]]++
				}
			}
		}
		out[j] = x
	}
	return out
}

// feTranspose returns the transpose of x, a cross-tabulation with cols
// columns. Entries of each row of the result are in increasing order.
func feTranspose(x *feCross, cols int) *feCross {
	rows := len(x.ptr) - 1
	t := &feCross{ptr: make([]int, cols+1), idx: make([]int32, len(x.idx))}
	for _, m := range x.idx {
		t.ptr[m+1]++
	}
	for m := 1; m <= cols; m++ {
		t.ptr[m] += t.ptr[m-1]
	}
	fill := slices.Clone(t.ptr[:cols])
	if x.w != nil {
		t.w = make([]float64, len(x.w))
	}
	for l := 0; l < rows; l++ {
		for p := x.ptr[l]; p < x.ptr[l+1]; p++ {
			m := x.idx[p]
			q := fill[m]
			fill[m]++
			t.idx[q] = int32(l)
			if x.w != nil {
				t.w[q] = x.w[p]
			}
		}
	}
	return t
}

// feScratch is one goroutine's working memory, reused across columns and
// sweeps.
type feScratch struct {
	sy         [][]float64 // level sums of the centred column, per effect
	sum        []float64   // per-level sums of one effect's update
	a1A, a1B   []float64   // first effect's coefficients after G(X), G(G(X))
	x, gx, ggx []float64   // states X, G(X), G(G(X))
	// Per-effect views of the coefficients: index 0 is a first-effect
	// buffer, index k≥1 a view into the corresponding state.
	vgx, vggx [][]float64
}

func (p *fePlan) newScratch() *feScratch {
	k := len(p.codes)
	s := &feScratch{sy: make([][]float64, k), sum: make([]float64, p.maxLev)}
	for j := range p.codes {
		s.sy[j] = make([]float64, len(p.inv[j]))
	}
	if k < 2 {
		return s
	}
	l0 := len(p.inv[0])
	s.a1A, s.a1B = make([]float64, l0), make([]float64, l0)
	s.x, s.gx, s.ggx = make([]float64, p.state), make([]float64, p.state), make([]float64, p.state)
	view := func(buf, first []float64) [][]float64 {
		v := make([][]float64, k)
		v[0] = first
		for j := 1; j < k; j++ {
			v[j] = buf[p.off[j] : p.off[j]+len(p.inv[j])]
		}
		return v
	}
	s.vgx = view(s.gx, s.a1A)
	s.vggx = view(s.ggx, s.a1B)
	return s
}

// absorbColumn writes y with the effects projected out into r. Column j
// is used in error messages only.
func (p *fePlan) absorbColumn(r, y []float64, j int, s *feScratch, tol float64, maxIter int) feResult {
	k := len(p.codes)
	var tot float64
	constant := true
	for _, v := range y {
		tot += v
		constant = constant && v == y[0]
	}
	if math.IsNaN(tot) || math.IsInf(tot, 0) {
		for i, v := range y {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return feResult{err: fmt.Errorf("ivcore: column %d, row %d is %v; fixed effects can only be absorbed from finite values: drop or fill such rows first", j, i, v)}
			}
		}
		return feResult{err: fmt.Errorf("ivcore: column %d: the sum of its values overflows; rescale the column (for example change its units) before absorbing", j)}
	}
	if k == 0 {
		copy(r, y)
		return feResult{converged: true}
	}
	if constant {
		// The effects span the constant: the residual is exactly zero.
		clear(r)
		return feResult{converged: true}
	}
	if k == 1 {
		sum := s.sum[:len(p.inv[0])]
		clear(sum)
		c0 := p.codes[0][:len(y)]
		for i, v := range y {
			sum[c0[i]] += v
		}
		inv := p.inv[0]
		for l := range sum {
			sum[l] *= inv[l]
		}
		for i, v := range y {
			r[i] = v - sum[c0[i]]
		}
		return feResult{sweeps: 1, converged: true}
	}

	// Centre the column, measure its scale, and sum it by level.
	mean := tot / float64(len(y))
	var ss, maxAbs float64
	for j := range s.sy {
		clear(s.sy[j])
	}
	for i, v := range y {
		d := v - mean
		ss += d * d
		maxAbs = max(maxAbs, math.Abs(d))
		for j, c := range p.codes {
			s.sy[j][c[i]] += d
		}
	}
	if maxAbs == 0 {
		clear(r)
		return feResult{converged: true}
	}
	scale := math.Sqrt(ss / float64(len(y)))
	if ss == 0 || math.IsInf(ss, 0) {
		// Standard deviation scaled by maxAbs against under- and overflow.
		ss = 0
		for _, v := range y {
			d := (v - mean) / maxAbs
			ss += d * d
		}
		scale = maxAbs * math.Sqrt(ss/float64(len(y)))
	}
	thresh := max(tol*scale, feRoundoff*maxAbs)

	clear(s.x)
	clear(s.a1B)
	sweeps := 0
	change := math.Inf(1)
	var final [][]float64 // coefficients that define the residuals written out
	converged := false
	for sweeps < maxIter {
		p.sweep(s, s.vgx, s.x, s.gx)
		sweeps++
		final = s.vgx
		if sweeps >= maxIter {
			// Report how far this last sweep moved from its input.
			change = feMaxDiff(s.a1A, s.a1B) + feStateChange(p, s.gx, s.x)
			break
		}
		p.sweep(s, s.vggx, s.gx, s.ggx)
		sweeps++
		final = s.vggx
		change = feMaxDiff(s.a1B, s.a1A) + feStateChange(p, s.ggx, s.gx)
		if change <= thresh {
			converged = true
			break
		}
		feIronsTuck(s.x, s.gx, s.ggx)
	}

	// r = (y - ȳ) - Σ_k a_k[c_k(i)].
	a0, c0 := final[0], p.codes[0][:len(y)]
	for i, v := range y {
		r[i] = (v - mean) - a0[c0[i]]
	}
	for j := 1; j < k; j++ {
		a, c := final[j], p.codes[j][:len(r)]
		for i := range r {
			r[i] -= a[c[i]]
		}
	}
	return feResult{sweeps: sweeps, change: change / scale, converged: converged}
}

// sweep computes one Gauss-Seidel sweep G: it copies the state in to the
// state out and then updates each effect's coefficients in vout in turn
// (vout[0] receives the first effect):
//
//	a_k = (sy_k - Σ_{j≠k} B_kj a_j) / n_k
func (p *fePlan) sweep(s *feScratch, vout [][]float64, in, out []float64) {
	copy(out, in)
	k := len(p.codes)
	if k == 2 {
		feCrossUpdate(vout[0], s.sy[0], p.inv[0], p.cross[0][1], vout[1])
		feCrossUpdate(vout[1], s.sy[1], p.inv[1], p.cross[1][0], vout[0])
		return
	}
	for e := range p.codes {
		a, sy, inv := vout[e], s.sy[e], p.inv[e]
		sum := s.sum[:len(a)]
		clear(sum)
		for j := range p.codes {
			if j != e {
				feCrossAdd(sum, p.cross[e][j], vout[j])
			}
		}
		for l := range a {
			a[l] = (sy[l] - sum[l]) * inv[l]
		}
	}
}

// feCrossUpdate sets a = (sy - B b) ∘ inv.
func feCrossUpdate(a, sy, inv []float64, x *feCross, b []float64) {
	ptr, idx := x.ptr[:len(a)+1], x.idx
	sy, inv = sy[:len(a)], inv[:len(a)]
	if x.w == nil {
		for l := range a {
			a[l] = (sy[l] - feSumAt(b, idx[ptr[l]:ptr[l+1]])) * inv[l]
		}
		return
	}
	for l := range a {
		lo, hi := ptr[l], ptr[l+1]
		a[l] = (sy[l] - feSumAtW(b, idx[lo:hi], x.w[lo:hi])) * inv[l]
	}
}

// feCrossAdd adds B b to sum.
func feCrossAdd(sum []float64, x *feCross, b []float64) {
	ptr, idx := x.ptr[:len(sum)+1], x.idx
	if x.w == nil {
		for l := range sum {
			sum[l] += feSumAt(b, idx[ptr[l]:ptr[l+1]])
		}
		return
	}
	for l := range sum {
		lo, hi := ptr[l], ptr[l+1]
		sum[l] += feSumAtW(b, idx[lo:hi], x.w[lo:hi])
	}
}

// feSumAt returns Σ_p b[idx[p]], with four partial sums to keep the
// floating-point adds independent.
func feSumAt(b []float64, idx []int32) float64 {
	var s0, s1, s2, s3 float64
	p := 0
	for ; p+4 <= len(idx); p += 4 {
		q := idx[p : p+4 : p+4]
		s0 += b[q[0]]
		s1 += b[q[1]]
		s2 += b[q[2]]
		s3 += b[q[3]]
	}
	for ; p < len(idx); p++ {
		s0 += b[idx[p]]
	}
	return (s0 + s1) + (s2 + s3)
}

// feSumAtW returns Σ_p w[p] b[idx[p]].
func feSumAtW(b []float64, idx []int32, w []float64) float64 {
	w = w[:len(idx)]
	var s0, s1 float64
	p := 0
	for ; p+2 <= len(idx); p += 2 {
		s0 += w[p] * b[idx[p]]
		s1 += w[p+1] * b[idx[p+1]]
	}
	if p < len(idx) {
		s0 += w[p] * b[idx[p]]
	}
	return s0 + s1
}

// feIronsTuck overwrites x with the Irons-Tuck extrapolation from x, gx =
// G(x) and ggx = G(G(x)).
func feIronsTuck(x, gx, ggx []float64) {
	gx = gx[:len(x)]
	ggx = ggx[:len(x)]
	var num, den float64
	for i := range x {
		d := ggx[i] - gx[i]
		d2 := d - (gx[i] - x[i])
		num += d * d2
		den += d2 * d2
	}
	if den == 0 || math.IsNaN(num/den) || math.IsInf(num/den, 0) {
		copy(x, ggx)
		return
	}
	c := num / den
	for i := range x {
		x[i] = ggx[i] - c*(ggx[i]-gx[i])
	}
}

// feStateChange returns Σ_{k≥1} max_l |a[k][l] - b[k][l]| over the
// effects stored in the state vectors a and b.
func feStateChange(p *fePlan, a, b []float64) float64 {
	var ch float64
	for k := 1; k < len(p.codes); k++ {
		lo, hi := p.off[k], p.off[k]+len(p.inv[k])
		ch += feMaxDiff(a[lo:hi], b[lo:hi])
	}
	return ch
}

// feMaxDiff returns max_i |a[i] - b[i]|.
func feMaxDiff(a, b []float64) float64 {
	b = b[:len(a)]
	var m float64
	for i, v := range a {
		m = max(m, math.Abs(v-b[i]))
	}
	return m
}
