package demo

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// pooledTarget computes the estimand of the suggested pooled model on this
// panel and the shock term of its OLS counterpart.
//
// With fixed effects for product x store absorbed (within transformation)
// and controls W = [temperature, promo], excluded instruments
// Z = [bean_index, freight_index], regressors X = [ln p, W] and
// instruments Q = [W, Z], the 2SLS estimate of ln q is
//
//	b = (X'Q (Q'Q)^-1 Q'X)^-1 X'Q (Q'Q)^-1 Q' ln q.
//
// It is linear in ln q = y* + e, where y* is the structural part and e
// the demand shocks (plus rounding of units). The target is b computed on
// y*: what the model estimates with the shocks removed. The OLS shock
// term is (X'X)^-1 X'e, first element.
func pooledTarget(c *columns, nP, nS int, acc *accum) (PooledTarget, OLSBias) {
	var pt PooledTarget
	ob := OLSBias{Direction: "toward zero"}
	var rows int
	var own, cross float64
	for i := range nP {
		rows += acc.rows[i]
		own += acc.own[i]
		cross += acc.cross[i]
	}
	if rows == 0 {
		return pt, ob
	}
	pt.MeanOwnElasticity = own / float64(rows)
	pt.MeanCrossSum = cross / float64(rows)

	// Columns: 0 y*, 1 e, 2 ln p, 3 temperature, 4 promo, 5 bean, 6 freight.
	const k = 7
	n := len(c.week)
	col := func(j, r int) float64 {
		switch j {
		case 0:
			return c.ystar[r]
		case 1:
			return math.Log(c.units[r]) - c.ystar[r]
		case 2:
			return c.logP[r]
		case 3:
			return c.temp[r]
		case 4:
			return c.promo[r]
		case 5:
			return c.bean[r]
		default:
			return c.freight[r]
		}
	}
	nG := nP * nS
	sum := make([]float64, nG*k)
	cnt := make([]float64, nG)
	for r := range n {
		g := int(c.product[r])*nS + int(c.store[r])
		cnt[g]++
		for j := range k {
			sum[g*k+j] += col(j, r)
		}
	}
	for g := range nG {
		if cnt[g] > 0 {
			for j := range k {
				sum[g*k+j] /= cnt[g]
			}
		}
	}
	gram := mat.NewSymDense(k, nil)
	var v [k]float64
	var a [k * k]float64
	for r := range n {
		g := int(c.product[r])*nS + int(c.store[r])
		for j := range k {
			v[j] = col(j, r) - sum[g*k+j]
		}
		for i := range k {
			for j := i; j < k; j++ {
				a[i*k+j] += v[i] * v[j]
			}
		}
	}
	for i := range k {
		for j := i; j < k; j++ {
			gram.SetSym(i, j, a[i*k+j])
		}
	}
	sub := func(rows, cols []int) *mat.Dense {
		m := mat.NewDense(len(rows), len(cols), nil)
		for i, r := range rows {
			for j, c := range cols {
				m.Set(i, j, gram.At(r, c))
			}
		}
		return m
	}
	xCols := []int{2, 3, 4}
	qCols := []int{3, 4, 5, 6}

	// OLS shock term.
	var cx mat.Cholesky
	if cx.Factorize(symOf(sub(xCols, xCols))) {
		var b mat.VecDense
		if err := cx.SolveVecTo(&b, sub(xCols, []int{1}).ColView(0)); err == nil {
			ob.ShockTerm = b.AtVec(0)
		}
	}

	// 2SLS on y*.
	var cq mat.Cholesky
	if !cq.Factorize(symOf(sub(qCols, qCols))) {
		return pt, ob
	}
	var aqx mat.Dense // (Q'Q)^-1 Q'X
	if err := cq.SolveTo(&aqx, sub(qCols, xCols)); err != nil {
		return pt, ob
	}
	var m mat.Dense
	m.Mul(sub(qCols, xCols).T(), &aqx) // X'Q (Q'Q)^-1 Q'X
	var rhs mat.Dense
	rhs.Mul(aqx.T(), sub(qCols, []int{0})) // X'Q (Q'Q)^-1 Q'y*
	var cm mat.Cholesky
	if !cm.Factorize(symOf(&m)) {
		return pt, ob
	}
	var b mat.VecDense
	if err := cm.SolveVecTo(&b, rhs.ColView(0)); err != nil {
		return pt, ob
	}
	if x := b.AtVec(0); !math.IsNaN(x) && !math.IsInf(x, 0) {
		pt.OwnElasticity = x
		pt.Defined = true
	}
	return pt, ob
}

// symOf copies the upper triangle of a square matrix into a SymDense.
func symOf(a mat.Matrix) *mat.SymDense {
	n, _ := a.Dims()
	s := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			s.SetSym(i, j, a.At(i, j))
		}
	}
	return s
}
