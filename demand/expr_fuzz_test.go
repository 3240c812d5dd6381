package demand

import (
	"testing"
)

// FuzzParseExpr checks that parsing never panics, that the canonical form
// of any accepted expression parses back to the same tree and is a fixed
// point, and that evaluating it on a small panel never panics.
func FuzzParseExpr(f *testing.F) {
	for _, seed := range []string{
		"1 + 2 * 3",
		"a - b - c",
		"-2^2",
		"2^-1^2",
		"(1 + 2) * -x",
		"log(units)",
		"exp(abs(sqrt(x)))",
		"lag(x)",
		"lag(x, 4) / x",
		"diff(log(AvgPrs / CPI), 10)",
		"`unit price` * 2",
		`product == "Nitro Can 250ml"`,
		`product != "say \"hi\" \\"`,
		"units > 0 && price <= 3.5 || !(week == 1)",
		"a < b < c",
		"1e-3 + .5 + 2.5E2",
		"x.y_1 + _z",
		"log + 1",
		"lag(x, -1)",
		"((((x))))",
		"`é` + 1",
		"price * (promo == 1)",
	} {
		f.Add(seed)
	}
	p := NewPanel("fuzz.csv", 6)
	p.AddNum("x", []float64{1, 2, 0, -1, exprNaN, 3})
	p.AddNum("units", []float64{4, 0, 2, 1, 5, exprNaN})
	p.AddNum("week", []float64{1, 2, 1, 2, 3, 3})
	p.AddText("store", exprTextCol("A", "A", "B", "B", "", "A"))
	p.AddText("product", exprTextCol("Nitro Can 250ml", "", "Black 1l", "Nitro Can 250ml", "Black 1l", "Oat"))
	keys := PanelKeys{Unit: "store", Time: "week"}
	f.Fuzz(func(t *testing.T, src string) {
		e, err := ParseExpr(src)
		if err != nil {
			if _, ok := err.(*ExprError); !ok {
				t.Fatalf("%q: error of type %T, want *ExprError", src, err)
			}
			return
		}
		s := e.String()
		e2, err := ParseExpr(s)
		if err != nil {
			t.Fatalf("%q: canonical form %q does not parse: %v", src, s, err)
		}
		if !exprSameTree(e.root, e2.root) {
			t.Fatalf("%q: canonical form %q parses to %s, want %s", src, s, exprSexpr(e2.root), exprSexpr(e.root))
		}
		if s2 := e2.String(); s2 != s {
			t.Fatalf("%q: canonical form is not a fixed point: %q then %q", src, s, s2)
		}
		v, err := e.EvalFloat(p, keys)
		if err == nil && len(v) != p.N {
			t.Fatalf("%q: got %d values for %d rows", src, len(v), p.N)
		}
		_, _ = e.EvalMask(p, keys)
	})
}
