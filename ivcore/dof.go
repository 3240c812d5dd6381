package ivcore

import "fmt"

// feDoF returns the description of each effect and the number of absorbed
// parameters, the rank of the dummy matrix D = [D_1 | … | D_K] or a
// conservative (larger) count:
//
//	K = 1:  DoF = L_1
//	K = 2:  DoF = L_1 + L_2 - C
//	K ≥ 3:  DoF = L_1 + L_2 - C + Σ_{k≥3} (L_k - 1)
//
// where L_k counts the levels of effect k that occur in the rows and C is
// the number of connected components of the bipartite graph whose nodes
// are the levels of the first two effects and whose edges are the rows
// (Abowd, Creecy & Kramarz 2002, "Computing person and firm effects using
// linked longitudinal employer-employee data", U.S. Census Bureau LEHD
// technical paper TP-2002-06; Gaure 2013). Each component
// carries one redundant level (a constant added to one effect's levels and
// subtracted from the other's leaves the fit unchanged); the count is
// exact for two effects. For a third and later effect one level is
// taken as redundant (its dummies sum to the constant, which the first
// effect already spans); further collinearity among three or more effects
// is not determined, so DoF may exceed the rank. That errs on the side of
// fewer residual degrees of freedom, and it is the common practice.
// Components are found with a union-find over the rows.
func feDoF(effects []Effect, n int) ([]EffectInfo, int) {
	info := make([]EffectInfo, len(effects))
	dof := 0
	occ := make([][]bool, len(effects))
	for k, e := range effects {
		occ[k] = make([]bool, e.Levels)
		for _, c := range e.Codes[:n] {
			occ[k][c] = true
		}
		lev := 0
		for _, o := range occ[k] {
			if o {
				lev++
			}
		}
		info[k] = EffectInfo{Name: e.Name, Levels: lev}
	}
	if len(effects) >= 2 {
		l1 := effects[0].Levels
		uf := newFEUnionFind(l1 + effects[1].Levels)
		c0, c1 := effects[0].Codes, effects[1].Codes[:len(effects[0].Codes)]
		for i, a := range c0 {
			uf.union(int(a), l1+int(c1[i]))
		}
		comps := 0
		for l, o := range occ[0] {
			if o && uf.find(l) == l {
				comps++
			}
		}
		for l, o := range occ[1] {
			if o && uf.find(l1+l) == l1+l {
				comps++
			}
		}
		info[1].Redundant = comps
		for k := 2; k < len(effects); k++ {
			if info[k].Levels > 0 {
				info[k].Redundant = 1
			}
		}
	}
	for _, e := range info {
		dof += e.Levels - e.Redundant
	}
	return info, dof
}

// feUnionFind is a disjoint-set forest with path halving and union by
// size.
type feUnionFind struct {
	parent []int32
	size   []int32
}

func newFEUnionFind(n int) *feUnionFind {
	u := &feUnionFind{parent: make([]int32, n), size: make([]int32, n)}
	for i := range u.parent {
		u.parent[i] = int32(i)
		u.size[i] = 1
	}
	return u
}

func (u *feUnionFind) find(x int) int {
	p := u.parent
	for int(p[x]) != x {
		p[x] = p[p[x]]
		x = int(p[x])
	}
	return x
}

func (u *feUnionFind) union(a, b int) {
	a, b = u.find(a), u.find(b)
	if a == b {
		return
	}
	if u.size[a] < u.size[b] {
		a, b = b, a
	}
	u.parent[b] = int32(a)
	u.size[a] += u.size[b]
}

// NestedIn reports whether effect e is nested in the clustering given by
// the codes c: every level of e that occurs lies within exactly one
// cluster,
//
//	c(i) = c(j) for all rows i, j with e.Codes[i] = e.Codes[j].
//
// Parameters of a nested effect are not counted in k in the small-sample
// factor of a cluster-robust covariance, since they vary only between
// clusters. NestedIn panics if c and e.Codes differ in length or a code of
// e lies outside [0, e.Levels).
func NestedIn(e Effect, c []int32) bool {
	if len(c) != len(e.Codes) {
		panic(fmt.Sprintf("ivcore: NestedIn has %d cluster codes for %d rows of effect %q", len(c), len(e.Codes), e.Name))
	}
	feCheckEffects([]Effect{e}, len(c))
	seen := make([]bool, e.Levels)
	cl := make([]int32, e.Levels)
	for i, l := range e.Codes {
		if !seen[l] {
			seen[l] = true
			cl[l] = c[i]
		} else if cl[l] != c[i] {
			return false
		}
	}
	return true
}
