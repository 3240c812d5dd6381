package elasticity

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// TestProductLineTwoProducts checks the product-line first-order
// conditions on a case solved by hand.
//
// Products 1 and 2, one owner, p = (2, 4), q = (100, 50),
// E = [[-3, 0.5], [0.4, -2.5]] (rows: quantity, columns: price).
// ∂q_k/∂p_j = e_kj q_k/p_j:
//
//	∂q1/∂p1 = -3·100/2 = -150     ∂q2/∂p1 = 0.4·50/2 = 10
//	∂q1/∂p2 = 0.5·100/4 = 12.5    ∂q2/∂p2 = -2.5·50/4 = -31.25
//
// With m = p - mc the conditions q_j + Σ_k ∂q_k/∂p_j m_k = 0 read
//
//	100 - 150 m1 + 10 m2 = 0
//	 50 + 12.5 m1 - 31.25 m2 = 0.
//
// From the first, m1 = (100 + 10 m2)/150; substituting,
// 50 + (1250 + 125 m2)/150 - 31.25 m2 = 0, so m2 (31.25 - 5/6) = 50 + 25/3,
// m2 = (175/3)/(365/12) = 140/73 and m1 = (100 + 1400/73)/150 = 58/73.
// Hence mc1 = 2 - 58/73 = 88/73, mc2 = 4 - 140/73 = 152/73, and the Lerner
// indices are 29/73 and 35/73. (Each is above its single-product value,
// 1/3 and 0.4: an owner of substitutes prices both higher.)
func TestProductLineTwoProducts(t *testing.T) {
	e := mat.NewDense(2, 2, []float64{-3, 0.5, 0.4, -2.5})
	pl := ProductLine{Products: []string{"oat_latte_can", "black_can"}, E: e, Price: []float64{2, 4}, Quantity: []float64{100, 50}}
	for run := 0; run < 2; run++ { // run twice: no state kept between calls
		res, err := ProductLineMarkups(pl)
		if err != nil {
			t.Fatal(err)
		}
		for i, test := range []struct {
			mc, lerner float64
			tol        float64
			source     string
		}{
			{88.0 / 73, 29.0 / 73, 1e-10, "solved by hand in the comment above"},
			{152.0 / 73, 35.0 / 73, 1e-10, "solved by hand in the comment above"},
		} {
			r := res.Rows[i]
			if !scalar.EqualWithinAbsOrRel(r.MarginalCost.Est, test.mc, test.tol, test.tol) || !scalar.EqualWithinAbsOrRel(r.Lerner.Est, test.lerner, test.tol, test.tol) {
				t.Errorf("%s: mc %.15g, L %.15g; want %.15g, %.15g (%s)", r.Product, r.MarginalCost.Est, r.Lerner.Est, test.mc, test.lerner, test.source)
			}
		}
		// Property check: q + Ω(p - mc) = 0 to 1e-10.
		for j := range 2 {
			s := pl.Quantity[j]
			for k := range 2 {
				s += e.At(k, j) * pl.Quantity[k] / pl.Price[j] * (pl.Price[k] - res.Rows[k].MarginalCost.Est)
			}
			if math.Abs(s) > 1e-10 {
				t.Errorf("first-order condition %d: residual %g", j, s)
			}
		}
	}
}

// TestProductLineReducesToInverseElasticity: a product with no sibling
// under its owner gets L = -1/e_jj (common practice: the inverse-elasticity
// rule is the one-product case of the first-order conditions).
func TestProductLineReducesToInverseElasticity(t *testing.T) {
	e := mat.NewDense(2, 2, []float64{-3, 0.5, 0.4, -2.5})
	for _, test := range []struct {
		name  string
		pl    ProductLine
		want  []float64
		tol   float64
		basis string
	}{
		{"single product", ProductLine{Products: []string{"a"}, E: mat.NewDense(1, 1, []float64{-2}), Price: []float64{3}, Quantity: []float64{10}}, []float64{0.5}, 1e-14, "inverse-elasticity rule, e = -2"},
		{"two owners", ProductLine{Products: []string{"a", "b"}, E: e, Price: []float64{2, 4}, Quantity: []float64{100, 50}, Owner: []string{"us", "rival"}}, []float64{1.0 / 3, 0.4}, 1e-14, "inverse-elasticity rule, e = -3 and -2.5"},
	} {
		res, err := ProductLineMarkups(test.pl)
		if err != nil {
			t.Fatalf("%s: %v", test.name, err)
		}
		for i, w := range test.want {
			if got := res.Rows[i].Lerner.Est; !scalar.EqualWithinAbsOrRel(got, w, test.tol, test.tol) {
				t.Errorf("%s: L_%d = %v, want %v (%s)", test.name, i, got, w, test.basis)
			}
		}
	}
}

// TestProductLineFirm: a rival's product is left out of the firm's
// conditions, and how the rival's units respond to our prices does not
// change our margins.
func TestProductLineFirm(t *testing.T) {
	base := []float64{
		-3, 0.5, 0.2,
		0.4, -2.5, 0.1,
		0.3, 0.3, -2,
	}
	pl := ProductLine{Products: []string{"oat_latte_can", "black_can", "rival_can"}, Price: []float64{2, 4, 3}, Quantity: []float64{100, 50, 80},
		Owner: []string{"us", "us", "rival"}, Firm: "us"}
	pl.E = mat.NewDense(3, 3, base)
	res, err := ProductLineMarkups(pl)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Rows) != 2 || res.Rows[0].Product != "oat_latte_can" || res.Rows[1].Product != "black_can" {
		t.Fatalf("rows %+v, want our two products", res.Rows)
	}
	changed := slices.Clone(base)
	changed[6], changed[7] = 0.9, 0.05 // the rival's response to our prices
	pl.E = mat.NewDense(3, 3, changed)
	res2, err := ProductLineMarkups(pl)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 2 {
		// Same as the two-product case solved by hand (29/73, 35/73).
		want := []float64{29.0 / 73, 35.0 / 73}[i]
		if math.Abs(res.Rows[i].Lerner.Est-want) > 1e-10 || math.Abs(res2.Rows[i].Lerner.Est-want) > 1e-10 {
			t.Errorf("%s: L = %v and %v, want %v", res.Rows[i].Product, res.Rows[i].Lerner.Est, res2.Rows[i].Lerner.Est, want)
		}
	}
	pl.Firm = "nobody"
	if _, err := ProductLineMarkups(pl); err == nil || !strings.Contains(err.Error(), `no product is owned by "nobody": the owners are "us", "rival"`) {
		t.Errorf("unknown firm: %v", err)
	}
}

func TestProductLineSingular(t *testing.T) {
	for _, test := range []struct {
		name     string
		products []string
		e        []float64
		want     []string
	}{
		// Equal revenues make the scaled system Eᵀ: [[-1, 1], [1, -1]] is
		// singular.
		{"two", []string{"cold_brew_330", "cold_brew_500"}, []float64{-1, 1, 1, -1}, []string{"cold_brew_330", "cold_brew_500"}},
		// Row z is half of row y, so the margins of y and z enter in fixed
		// proportion; x is not involved.
		{"three", []string{"x", "y", "z"}, []float64{-3, 0.2, 0.1, 0.2, -2, 1.5, 0.1, -1, 0.75}, []string{"y", "z"}},
	} {
		n := len(test.products)
		pl := ProductLine{Products: test.products, E: mat.NewDense(n, n, test.e), Price: make([]float64, n), Quantity: make([]float64, n)}
		for i := range n {
			pl.Price[i], pl.Quantity[i] = 2, 50
		}
		_, err := ProductLineMarkups(pl)
		var se *SingularLineError
		if !errors.As(err, &se) {
			t.Fatalf("%s: error %v, want a SingularLineError", test.name, err)
		}
		if !slices.Equal(se.Products, test.want) {
			t.Errorf("%s: named %v, want %v", test.name, se.Products, test.want)
		}
		if !strings.Contains(err.Error(), "cannot be solved for the margins of") {
			t.Errorf("%s: message %q", test.name, err)
		}
	}
}

func TestProductLineDraws(t *testing.T) {
	e := []float64{-3, 0.5, 0.4, -2.5}
	var draws [][]float64
	for r := range 200 {
		d := slices.Clone(e)
		s := float64(r-100) / 400 // -0.25 … +0.25
		d[0] += s
		d[3] -= s
		draws = append(draws, d)
	}
	pl := ProductLine{Products: []string{"a", "b"}, E: mat.NewDense(2, 2, e), Price: []float64{2, 4}, Quantity: []float64{100, 50}, Draws: draws, Level: 0.9}
	res, err := ProductLineMarkups(pl)
	if err != nil {
		t.Fatal(err)
	}
	if res.Draws != 200 || res.Failed != 0 {
		t.Fatalf("draws %d, failed %d", res.Draws, res.Failed)
	}
	for _, r := range res.Rows {
		if !(r.Lerner.Lo < r.Lerner.Est && r.Lerner.Est < r.Lerner.Hi) || !(r.MarginalCost.Lo < r.MarginalCost.Est && r.MarginalCost.Est < r.MarginalCost.Hi) {
			t.Errorf("%s: bands %+v %+v do not bracket the estimate", r.Product, r.Lerner, r.MarginalCost)
		}
	}
}

func TestProductLineBadInput(t *testing.T) {
	pl := ProductLine{Products: []string{"a", "b"}, E: mat.NewDense(2, 2, []float64{-3, 0.5, 0.4, -2.5}), Price: []float64{2, 4}, Quantity: []float64{100, 0}}
	if _, err := ProductLineMarkups(pl); err == nil || !strings.Contains(err.Error(), `product "b": the product-line conditions need a positive quantity`) {
		t.Errorf("zero quantity: %v", err)
	}
	pl.Quantity[1], pl.Price[0] = 50, -1
	if _, err := ProductLineMarkups(pl); err == nil || !strings.Contains(err.Error(), `product "a": the price must be positive`) {
		t.Errorf("negative price: %v", err)
	}
}

// TestProductLineInconsistent: a solution outside 0 < L < 1 is not shown
// as a margin (DESIGN.md: never a negative margin printed as fact).
func TestProductLineInconsistent(t *testing.T) {
	for _, test := range []struct {
		e    float64
		want string
	}{
		{-0.5, "Lerner index of 2.00, a marginal cost of zero or below"},  // L = -1/e = 2
		{0.5, "Lerner index of -2.00, a price at or below marginal cost"}, // L = -2
	} {
		res, err := ProductLineMarkups(ProductLine{Products: []string{"black_bottle"}, E: mat.NewDense(1, 1, []float64{test.e}), Price: []float64{3.1}, Quantity: []float64{800}})
		if err != nil {
			t.Fatal(err)
		}
		r := res.Rows[0]
		if !math.IsNaN(r.Lerner.Est) || !math.IsNaN(r.MarginalCost.Est) || !strings.Contains(r.Caution, test.want) {
			t.Errorf("e = %v: %+v", test.e, r)
		}
	}
}
