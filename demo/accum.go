package demo

// accum sums per-product quantities over the recorded rows, for the truth.
type accum struct {
	rows                  []int
	mc                    []float64 // Σ true marginal cost
	bean, freight, bottle []float64 // Σ d log p / d index point
	label, ingredient     []float64
	own, cross            []float64 // Σ own elasticity, Σ cross sum over stocked products
}

func newAccum(nP int) *accum {
	f := func() []float64 { return make([]float64, nP) }
	return &accum{rows: make([]int, nP), mc: f(), bean: f(), freight: f(), bottle: f(),
		label: f(), ingredient: f(), own: f(), cross: f()}
}

// add records one row of product i with marginal cost mc and cross sum
// cross. The first-stage effect of index k on log price is
//
//	d ln p / d z_k = c_i * s_k / (100 * mc).
func (a *accum) add(i int, p product, mc, cross float64) {
	a.rows[i]++
	a.mc[i] += mc
	d := p.unitCost / (100 * mc)
	a.bean[i] += shareBean * d
	a.freight[i] += shareFreight * d
	if p.bottled {
		a.bottle[i] += shareBottle * d
	}
	a.label[i] += shareLabel * d
	a.ingredient[i] += p.ingShare * d
	a.own[i] += p.own
	a.cross[i] += cross
}
