package elasticity

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// ProductLine describes the products of a line, who owns each, and the
// own- and cross-price elasticities among them.
type ProductLine struct {
	// Products names the products; the order indexes everything else.
	Products []string
	// E holds the elasticities: E.At(k, j) is the elasticity of product
	// k's quantity with respect to product j's price (rows: quantity,
	// columns: price).
	E mat.Matrix
	// Price and Quantity are the current price and units of each product;
	// both must be positive.
	Price, Quantity []float64
	// Owner labels the firm that sets each product's price. Nil means one
	// firm owns every product.
	Owner []string
	// Firm restricts the solution to the products of one owner; empty
	// means every owner's products are solved (each owner pricing its own
	// products, rivals' prices taken as given).
	Firm string
	// Draws optionally holds elasticity matrices drawn from the
	// estimate's uncertainty (bootstrap replicates), each n×n in row-major
	// order; Level is the band level for their percentiles.
	Draws [][]float64
	Level float64
}

// LineMarkup is the product-line solution for one product.
type LineMarkup struct {
	Product, Owner string
	Price          float64
	// MarginalCost is the implied marginal cost and Lerner the implied
	// (p - mc)/p, with percentile bands when draws were given (NaN ends
	// otherwise).
	MarginalCost, Lerner Interval
	// Caution is set, and the margins left NaN, when the solution is not
	// a margin between 0 and 1 (a marginal cost between 0 and the price).
	Caution string
}

// LineResult is the solution of the product-line first-order conditions.
type LineResult struct {
	Rows []LineMarkup
	// Draws is the number of draws solved, and Failed the number whose
	// system was singular.
	Draws, Failed int
	Level         float64
}

// SingularLineError reports product-line first-order conditions that
// cannot be solved and names the products involved.
type SingularLineError struct {
	Owner string
	// Products are the products whose margins cannot be told apart.
	Products []string
}

func (e *SingularLineError) Error() string {
	who := "the line"
	if e.Owner != "" {
		who = fmt.Sprintf("%q", e.Owner)
	}
	return fmt.Sprintf("the first-order conditions of %s cannot be solved for the margins of %s: with these own- and cross-price elasticities, their margins enter the conditions in fixed proportion (a singular system); check the cross-price elasticities among them, or give them different owners if rivals set some of these prices",
		who, quoteList(e.Products))
}

// ProductLineMarkups solves the first-order conditions of multi-product
// profit maximisation for the implied marginal costs at current prices.
// Owner f of product j chooses p_j to maximise Σ_{k∈f}(p_k - mc_k) q_k, so
//
//	q_j + Σ_k O_jk (∂q_k/∂p_j)(p_k - mc_k) = 0   for every product j,
//	∂q_k/∂p_j = e_kj q_k / p_j,
//
// with O_jk = 1 when j and k have the same owner and 0 otherwise. In
// matrix form q + Ω(p - mc) = 0 with Ω = O ⊙ (∂q/∂p)ᵀ. Dividing row j by
// q_j and writing L_k = (p_k - mc_k)/p_k and R_k = p_k q_k gives the
// dimensionless system solved here with an LU factorisation,
//
//	Σ_k O_jk e_kj (R_k/R_j) L_k = -1,
//
// which for a product with no sibling under the same owner is the
// inverse-elasticity rule L_j = -1/e_jj. E is the full matrix, rivals'
// products included: their prices are held at current levels (which the
// current quantities reflect), and O masks their terms out of a firm's
// conditions, since a firm does not earn their margins. The system is
// therefore block diagonal by owner and each block is solved alone; with
// Firm set only that owner's block is solved.
//
// A singular block returns a *SingularLineError naming the products whose
// margins cannot be separated (found from the first negligible pivot of the
// LU factor and the columns it depends on). ProductLineMarkups panics if the
// lengths differ or E is not n×n.
//
// Reference: Nevo (2001), "Measuring market power in the ready-to-eat
// cereal industry", Econometrica 69(2), 307-342, section 3.3.
func ProductLineMarkups(pl ProductLine) (*LineResult, error) {
	n := len(pl.Products)
	if r, c := pl.E.Dims(); r != n || c != n {
		panic("elasticity: elasticity matrix is not products × products")
	}
	if len(pl.Price) != n || len(pl.Quantity) != n || (pl.Owner != nil && len(pl.Owner) != n) {
		panic("elasticity: product-line slices differ in length")
	}
	for j := range n {
		if !(pl.Price[j] > 0) || math.IsInf(pl.Price[j], 0) {
			return nil, fmt.Errorf("product %q: the price must be positive, got %v", pl.Products[j], pl.Price[j])
		}
		if !(pl.Quantity[j] > 0) || math.IsInf(pl.Quantity[j], 0) {
			return nil, fmt.Errorf("product %q: the product-line conditions need a positive quantity, got %v", pl.Products[j], pl.Quantity[j])
		}
	}
	owner := func(j int) string {
		if pl.Owner == nil {
			return ""
		}
		return pl.Owner[j]
	}
	// Blocks: products of each owner, in order of first appearance.
	var owners []string
	blocks := map[string][]int{}
	for j := range n {
		o := owner(j)
		if pl.Firm != "" && o != pl.Firm {
			continue
		}
		if _, ok := blocks[o]; !ok {
			owners = append(owners, o)
		}
		blocks[o] = append(blocks[o], j)
	}
	if len(owners) == 0 {
		var known []string
		for j := range n {
			if o := owner(j); !slices.Contains(known, o) {
				known = append(known, o)
			}
		}
		return nil, fmt.Errorf("no product is owned by %q: the owners are %s", pl.Firm, quoteList(known))
	}

	rev := make([]float64, n)
	for j := range n {
		rev[j] = pl.Price[j] * pl.Quantity[j]
	}
	at := func(e []float64) func(k, j int) float64 {
		if e == nil {
			return pl.E.At
		}
		return func(k, j int) float64 { return e[k*n+j] }
	}
	lerner := make([]float64, n)
	res := &LineResult{Level: pl.Level}
	for _, o := range owners {
		idx := blocks[o]
		l, err := solveLineBlock(idx, at(nil), rev, pl.Products)
		if err != nil {
			err.(*SingularLineError).Owner = o
			return nil, err
		}
		for a, j := range idx {
			lerner[j] = l[a]
		}
	}
	// Percentile bands from the draws.
	var dl [][]float64 // per product, Lerner draws
	if len(pl.Draws) > 0 {
		dl = make([][]float64, n)
		for _, d := range pl.Draws {
			if len(d) != n*n {
				panic("elasticity: an elasticity draw is not products × products")
			}
			row := make([]float64, n)
			ok := true
			for _, o := range owners {
				idx := blocks[o]
				l, err := solveLineBlock(idx, at(d), rev, pl.Products)
				if err != nil {
					ok = false
					break
				}
				for a, j := range idx {
					row[j] = l[a]
				}
			}
			if !ok {
				res.Failed++
				continue
			}
			res.Draws++
			for _, o := range owners {
				for _, j := range blocks[o] {
					dl[j] = append(dl[j], row[j])
				}
			}
		}
	}
	level := pl.Level
	if level == 0 {
		level = 0.95
	}
	for _, o := range owners {
		for _, j := range blocks[o] {
			p := pl.Price[j]
			lm := LineMarkup{Product: pl.Products[j], Owner: o, Price: p,
				Lerner:       Interval{lerner[j], math.NaN(), math.NaN()},
				MarginalCost: Interval{p * (1 - lerner[j]), math.NaN(), math.NaN()},
			}
			if dl != nil && len(dl[j]) > 1 {
				x := dl[j]
				sort.Float64s(x)
				lm.Lerner.Lo = stat.Quantile((1-level)/2, stat.Empirical, x, nil)
				lm.Lerner.Hi = stat.Quantile((1+level)/2, stat.Empirical, x, nil)
				lm.MarginalCost.Lo = p * (1 - lm.Lerner.Hi)
				lm.MarginalCost.Hi = p * (1 - lm.Lerner.Lo)
			}
			switch {
			case lerner[j] >= 1:
				lm.Caution = fmt.Sprintf("%s: the owner's first-order conditions give a Lerner index of %.2f, a marginal cost of zero or below; these elasticities and prices are not consistent with profit maximisation by the owner, so no product-line margin is shown (see the reasons listed for inelastic estimates)", pl.Products[j], lerner[j])
			case lerner[j] <= 0:
				lm.Caution = fmt.Sprintf("%s: the owner's first-order conditions give a Lerner index of %.2f, a price at or below marginal cost; that holds only if this product is sold at a loss to support its siblings, which is possible (a loss leader) but more often means the cross-price elasticities are overstated, so no product-line margin is shown", pl.Products[j], lerner[j])
			}
			if lm.Caution != "" {
				lm.Lerner, lm.MarginalCost = noInterval, noInterval
			}
			res.Rows = append(res.Rows, lm)
		}
	}
	return res, nil
}

// solveLineBlock solves Σ_k e_kj (R_k/R_j) L_k = -1 over the products idx
// of one owner.
func solveLineBlock(idx []int, e func(k, j int) float64, rev []float64, names []string) ([]float64, error) {
	m := len(idx)
	a := mat.NewDense(m, m, nil)
	amax := 0.0
	for r, j := range idx {
		for c, k := range idx {
			v := e(k, j) * rev[k] / rev[j]
			a.Set(r, c, v)
			amax = math.Max(amax, math.Abs(v))
		}
	}
	var lu mat.LU
	lu.Factorize(a)
	var u mat.TriDense
	lu.UTo(&u)
	tol := 1e-10 * math.Max(amax, math.SmallestNonzeroFloat64) * float64(m)
	for i := range m {
		if math.Abs(u.At(i, i)) <= tol {
			return nil, &SingularLineError{Products: dependentProducts(&u, i, idx, names)}
		}
	}
	if c := lu.Cond(); c > 1e12 || math.IsInf(c, 0) {
		// No single negligible pivot, but the system is ill-conditioned:
		// name the smallest pivot's column and its dependents.
		small := 0
		for i := range m {
			if math.Abs(u.At(i, i)) < math.Abs(u.At(small, small)) {
				small = i
			}
		}
		return nil, &SingularLineError{Products: dependentProducts(&u, small, idx, names)}
	}
	b := mat.NewVecDense(m, nil)
	for i := range m {
		b.SetVec(i, -1)
	}
	var x mat.VecDense
	if err := lu.SolveVecTo(&x, false, b); err != nil {
		return nil, &SingularLineError{Products: subset(idx, names)}
	}
	out := make([]float64, m)
	for i := range m {
		out[i] = x.AtVec(i)
	}
	return out, nil
}

// dependentProducts names product i of the block and the earlier products
// its column depends on: with PA = LU (rows permuted only), a negligible
// pivot U_ii means A[:,i] = A[:,:i] c with U[:i,:i] c = U[:i,i].
func dependentProducts(u *mat.TriDense, i int, idx []int, names []string) []string {
	c := make([]float64, i)
	for r := i - 1; r >= 0; r-- {
		s := u.At(r, i)
		for k := r + 1; k < i; k++ {
			s -= u.At(r, k) * c[k]
		}
		if d := u.At(r, r); d != 0 {
			c[r] = s / d
		}
	}
	var out []string
	for r, v := range c {
		if math.Abs(v) > 1e-8 {
			out = append(out, names[idx[r]])
		}
	}
	return append(out, names[idx[i]])
}

func subset(idx []int, names []string) []string {
	out := make([]string, len(idx))
	for i, j := range idx {
		out[i] = names[j]
	}
	return out
}

func quoteList(s []string) string {
	q := make([]string, len(s))
	for i, v := range s {
		q[i] = fmt.Sprintf("%q", v)
	}
	return strings.Join(q, ", ")
}
