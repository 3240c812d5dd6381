package elasticity

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

func mustChange(t *testing.T, s string, products []string) Change {
	t.Helper()
	c, err := ParseChange(s, products)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func TestParseChange(t *testing.T) {
	products := []string{"oat_latte_can", "black_bottle", "a=b"}
	for _, test := range []struct {
		in    string
		kind  ChangeKind
		value float64
		index int
		newP  float64 // from a current price of 2.00
	}{
		{"oat_latte_can=+5%", Percent, 5, 0, 2.10},
		{"black_bottle=-3%", Percent, -3, 1, 1.94},
		{" black_bottle = 2.5% ", Percent, 2.5, 1, 2.05},
		{"oat_latte_can=4.20", NewPrice, 4.20, 0, 4.20},
		{"a=b=1.5", NewPrice, 1.5, 2, 1.5},
	} {
		c, err := ParseChange(test.in, products)
		if err != nil {
			t.Errorf("%q: %v", test.in, err)
			continue
		}
		if c.Kind != test.kind || c.Value != test.value || c.Index != test.index || math.Abs(c.Apply(2)-test.newP) > 1e-12 {
			t.Errorf("%q: %+v (new price %v), want kind %v value %v index %d new price %v", test.in, c, c.Apply(2), test.kind, test.value, test.index, test.newP)
		}
	}
	for _, test := range []struct{ in, want string }{
		{"espresso=+5%", `unknown product "espresso" in price change "espresso=+5%"; the products are "oat_latte_can", "black_bottle", "a=b"`},
		{"Oat_Latte_Can=+5%", `did you mean "oat_latte_can"?`},
		{"oat_latte_can+5%", `has no '=': write PRODUCT=+5% (raise by 5 percent), PRODUCT=-3% (cut by 3 percent) or PRODUCT=4.20 (a new price)`},
		{"=+5%", "names no product"},
		{"oat_latte_can=five%", `cannot read "five%" as a percentage; write PRODUCT=+5%`},
		{"oat_latte_can=cheap", `cannot read "cheap" as a new price; write PRODUCT=+5%`},
		{"oat_latte_can=+0.20", "a signed number without % is ambiguous"},
		{"oat_latte_can=-100%", "a cut of 100% or more leaves no price"},
		{"oat_latte_can=0", "a new price must be positive"},
	} {
		_, err := ParseChange(test.in, products)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%q: error %v\nwant it to contain %q", test.in, err, test.want)
		}
	}
}

// TestSimulateOneProduct checks a what-if against values computed by hand
// from q' = q (p'/p)^e with e = -2, p = 2.00 → 2.10 (+5%), q = 1000,
// c = 1.20: q'/q = 1.05^-2 = 1/1.1025 = 0.907029478458…
//
//	Δunits        = 1000 (0.907029… - 1)            = -92.9705215…
//	Δrevenue      = 2.10·907.029… - 2000 = 2000/1.05 - 2000 = -95.2380952…
//	Δcontribution = 0.90·907.029… - 0.80·1000      = 16.3265306…
//
// and the delta-method s.e. of Δunits, se(e)·q·(q'/q)·ln 1.05 with
// se(e) = 0.2: 0.2·907.029…·0.0487901642 = 8.85082343…
func TestSimulateOneProduct(t *testing.T) {
	est := &Estimates{Products: []string{"oat_latte_can"}, E: mat.NewDense(1, 1, []float64{-2}), SE: mat.NewDense(1, 1, []float64{0.2})}
	base := Baseline{Price: []float64{2}, Quantity: []float64{1000}, UnitCost: []float64{1.2}, PriceMin: []float64{1.6}, PriceMax: []float64{2.05}}
	sim, err := Simulate(est, base, []Change{mustChange(t, "oat_latte_can=+5%", est.Products)})
	if err != nil {
		t.Fatal(err)
	}
	r := sim.Rows[0]
	z := ivcore.Critical(0.95, 0)
	for _, test := range []struct {
		name string
		got  float64
		want float64
		tol  float64
	}{
		{"new price", r.NewPrice, 2.1, 1e-14},
		{"new units", r.NewUnits.Est, 907.0294784580498, 1e-12},
		{"units change", r.UnitsChange.Est, -92.97052154195018, 1e-12},
		{"units change %", r.UnitsPct.Est, -9.297052154195018, 1e-12},
		{"revenue change", r.RevenueChange.Est, -95.23809523809541, 1e-12},
		{"revenue change %", r.RevenuePct.Est, -4.761904761904762, 1e-12},
		{"contribution change", r.ContributionChange.Est, 16.326530612244824, 1e-12},
		{"contribution change %", r.ContributionPct.Est, 2.040816326530612, 1e-12},
		{"units band low", r.UnitsChange.Lo, -92.97052154195018 - z*8.850823432096517, 1e-10},
		{"units band high", r.UnitsChange.Hi, -92.97052154195018 + z*8.850823432096517, 1e-10},
		{"line revenue", sim.Total.RevenueChange.Est, -95.23809523809541, 1e-12},
	} {
		if !scalar.EqualWithinAbsOrRel(test.got, test.want, test.tol, test.tol) {
			t.Errorf("%s = %.15g, want %.15g (by hand, see comment)", test.name, test.got, test.want)
		}
	}
	if !r.Extrapolated || len(sim.Warnings) != 1 || !strings.Contains(sim.Warnings[0], "above the highest price in the data (2.05)") {
		t.Errorf("no extrapolation warning: %v", sim.Warnings)
	}
	if sim.Assumption != ConstantElasticityNote || !strings.Contains(sim.Band, "delta method") {
		t.Errorf("assumption %q, band %q", sim.Assumption, sim.Band)
	}
}

// TestSimulateCross checks a two-product what-if with cross-price effects,
// computed by hand: E = [[-2, 0.5], [0.3, -3]], p = (2, 4), q = (1000, 500),
// c = (1.2, 2.5), the first price up 10%:
//
//	q'1/q1 = 1.1^-2 = 1/1.21 = 0.826446…   q'2/q2 = 1.1^0.3 = 1.029005759…
//	Δunits = (-173.553719…, +14.502879…)
//	Δrevenue = (2000/1.1 - 2000, 4·500·(1.1^0.3 - 1)) = (-181.818181…, 58.011518…)
//	Δcontribution = (1.0·826.446… - 800, 1.5·500·(1.1^0.3 - 1)) = (26.446280…, 21.754319…)
//	line revenue -123.806662…, -3.0951665…% of 4000;
//	line contribution 48.200600…, +3.1097161…% of 1550.
func TestSimulateCross(t *testing.T) {
	est := &Estimates{Products: []string{"oat_latte_can", "black_bottle"}, E: mat.NewDense(2, 2, []float64{-2, 0.5, 0.3, -3}), Cross: true}
	base := Baseline{Price: []float64{2, 4}, Quantity: []float64{1000, 500}, UnitCost: []float64{1.2, 2.5}}
	sim, err := Simulate(est, base, []Change{mustChange(t, "oat_latte_can=2.20", est.Products)})
	if err != nil {
		t.Fatal(err)
	}
	for _, test := range []struct {
		name      string
		got, want float64
	}{
		{"units 1", sim.Rows[0].UnitsChange.Est, -173.55371900826455},
		{"units 2", sim.Rows[1].UnitsChange.Est, 14.502879710547534},
		{"revenue 1", sim.Rows[0].RevenueChange.Est, -181.81818181818198},
		{"revenue 2", sim.Rows[1].RevenueChange.Est, 58.01151884219007},
		{"contribution 1", sim.Rows[0].ContributionChange.Est, 26.446280991735648},
		{"contribution 2", sim.Rows[1].ContributionChange.Est, 21.754319565821334},
		{"line revenue", sim.Total.RevenueChange.Est, -123.80666297599191},
		{"line revenue %", sim.Total.RevenuePct.Est, -3.095166574399798},
		{"line contribution", sim.Total.ContributionChange.Est, 48.20060055755698},
		{"line contribution %", sim.Total.ContributionPct.Est, 3.109716165003676},
	} {
		if !scalar.EqualWithinAbsOrRel(test.got, test.want, 1e-10, 1e-10) {
			t.Errorf("%s = %.15g, want %.15g (by hand, see comment)", test.name, test.got, test.want)
		}
	}
	if sim.Rows[1].Changed || !sim.Rows[0].Changed {
		t.Error("wrong products marked as changed")
	}
	if !strings.HasPrefix(sim.Band, "none") || !math.IsNaN(sim.Rows[0].UnitsChange.Lo) {
		t.Errorf("bands without any uncertainty given: %q", sim.Band)
	}
	if len(sim.Notes) != 1 || !strings.Contains(sim.Notes[0], "range of prices observed in the data is not known for oat_latte_can") {
		t.Errorf("notes %v", sim.Notes)
	}
}

// TestSimulateDraws: with draws the bands are the percentiles of each
// quantity over the draws. Δunits is increasing in e for a price rise, so
// its percentiles are Δunits at the percentiles of e (a property of
// percentiles under monotone maps).
func TestSimulateDraws(t *testing.T) {
	est := &Estimates{Products: []string{"oat_latte_can"}, E: mat.NewDense(1, 1, []float64{-2})}
	var es []float64
	for r := range 999 {
		e := -2.5 + float64(r)/998
		es = append(es, e)
		est.Draws = append(est.Draws, []float64{e})
	}
	base := Baseline{Price: []float64{2}, Quantity: []float64{1000}}
	sim, err := Simulate(est, base, []Change{mustChange(t, "oat_latte_can=+5%", est.Products)})
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := percentiles(es, 0.95)
	du := func(e float64) float64 { return 1000 * (math.Pow(1.05, e) - 1) }
	u := sim.Rows[0].UnitsChange
	if !scalar.EqualWithinAbsOrRel(u.Lo, du(lo), 1e-10, 1e-10) || !scalar.EqualWithinAbsOrRel(u.Hi, du(hi), 1e-10, 1e-10) {
		t.Errorf("band [%v, %v], want [%v, %v]", u.Lo, u.Hi, du(lo), du(hi))
	}
	if !strings.Contains(sim.Band, "999 bootstrap draws") {
		t.Errorf("band %q", sim.Band)
	}
	if !math.IsNaN(sim.Rows[0].ContributionChange.Est) || len(sim.Notes) == 0 {
		t.Error("contribution without a unit cost, or no note about it")
	}
}

func TestSimulateErrors(t *testing.T) {
	products := []string{"oat_latte_can", "black_bottle"}
	est := &Estimates{Products: products, E: mat.NewDense(2, 2, []float64{-2, 0, 0, -3})}
	base := Baseline{Price: []float64{2, 4}}
	if _, err := Simulate(est, base, nil); err == nil || !strings.Contains(err.Error(), "no price change to simulate") {
		t.Errorf("no changes: %v", err)
	}
	twice := []Change{mustChange(t, "black_bottle=+5%", products), mustChange(t, "black_bottle=3.80", products)}
	if _, err := Simulate(est, base, twice); err == nil || !strings.Contains(err.Error(), `product "black_bottle" is changed twice ("black_bottle=+5%" and "black_bottle=3.80")`) {
		t.Errorf("changed twice: %v", err)
	}
	base.Price[1] = math.NaN()
	if _, err := Simulate(est, base, twice[:1]); err == nil || !strings.Contains(err.Error(), `product "black_bottle" has no usable current price`) {
		t.Errorf("no price: %v", err)
	}
	// Without quantities: percentages only, with a note; own-only
	// estimates get the no-cross note.
	base.Price[1] = 4
	sim, err := Simulate(est, base, twice[:1])
	if err != nil {
		t.Fatal(err)
	}
	if !math.IsNaN(sim.Rows[1].UnitsChange.Est) || math.Abs(sim.Rows[1].UnitsPct.Est-100*(math.Pow(1.05, -3)-1)) > 1e-12 {
		t.Errorf("percent-only row: %+v", sim.Rows[1])
	}
	if sim.Rows[0].UnitsPct.Est != 0 {
		t.Errorf("no cross effects, but the sibling moved %v%%", sim.Rows[0].UnitsPct.Est)
	}
	notes := strings.Join(sim.Notes, "\n")
	for _, want := range []string{"changes are given in percent only", "cross-price elasticities were not estimated"} {
		if !strings.Contains(notes, want) {
			t.Errorf("notes lack %q: %s", want, notes)
		}
	}
}

const ownOnlyJSON = `{
  "source": "coldbrew_panel.csv", "n": 41600, "level": 0.9, "df": 99,
  "coefficients": [{"name": "ln_price", "estimate": -2.1}],
  "elasticities": [
    {"product": "oat_latte_can", "own_price": -2.3, "std_error": 0.2, "ci_low": -2.63, "ci_high": -1.97, "at": "everywhere", "n": 20800,
     "mean_price": 2.49, "mean_quantity": 1200, "price_min": 2.19, "price_max": 2.79},
    {"product": "black_bottle", "own_price": -0.8, "std_error": 0.25, "ci_low": -1.21, "ci_high": -0.39, "at": "everywhere", "n": 20800}
  ]
}`

const crossJSON = `{
  "cross_price": {"products": ["oat_latte_can", "black_bottle"], "level": 0.95, "band": "wald",
    "matrix": [[-2.3, 0.4], [0.2, -1.8]], "std_errors": [[0.2, 0.1], [0.05, 0.3]],
    "ci_low": [[-2.69, 0.2], [0.1, -2.39]], "ci_high": [[-1.91, 0.6], [0.3, -1.21]],
    "unit": "store", "time": "week", "matched": {"keys": 5200, "complete": 5100}},
  "cautions": ["..."]
}`

func writeTemp(t *testing.T, name, s string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(s), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestEstimateFile(t *testing.T) {
	f, err := ReadEstimateFile(writeTemp(t, "est.json", ownOnlyJSON))
	if err != nil {
		t.Fatal(err)
	}
	est, err := f.Estimates("est.json", nil)
	if err != nil {
		t.Fatal(err)
	}
	if est.Cross || est.E.At(0, 0) != -2.3 || est.E.At(1, 1) != -0.8 || est.E.At(0, 1) != 0 || est.SE.At(1, 1) != 0.25 || est.Level != 0.9 || est.DF != 99 {
		t.Errorf("own-only estimates: %+v", est)
	}
	if o := est.Own(1); o.Lo != -1.21 || o.Hi != -0.39 || o.SE != 0.25 {
		t.Errorf("own band %+v", o)
	}
	// The critical value of the file's own Wald bands, (-1.97 + 2.3)/0.2.
	if math.Abs(est.Crit-1.65) > 1e-12 {
		t.Errorf("critical value %v, want 1.65 from the file's bands", est.Crit)
	}
	b := f.Baseline(est.Products)
	if b.Price[0] != 2.49 || b.Quantity[0] != 1200 || b.PriceMax[0] != 2.79 || !math.IsNaN(b.Price[1]) {
		t.Errorf("baseline %+v", b)
	}

	f, err = ReadEstimateFile(writeTemp(t, "cross.json", crossJSON))
	if err != nil {
		t.Fatal(err)
	}
	est, err = f.Estimates("cross.json", nil)
	if err != nil {
		t.Fatal(err)
	}
	if !est.Cross || est.E.At(0, 1) != 0.4 || est.E.At(1, 0) != 0.2 || est.SE.At(1, 0) != 0.05 {
		t.Errorf("cross estimates: %+v", est)
	}
	if o := est.Own(1); o.Lo != -2.39 || o.Hi != -1.21 || o.SE != 0.3 {
		t.Errorf("own band from the matrix bands: %+v", o)
	}
	// Without band matrices the own band is the Wald band from the
	// standard error, -1.8 ± 1.959964·0.3 (normal quantile, common
	// practice).
	f.CrossPrice.CILow, f.CrossPrice.CIHigh = nil, nil
	est, err = f.Estimates("cross.json", nil)
	if err != nil {
		t.Fatal(err)
	}
	if o := est.Own(1); math.Abs(o.Lo-(-1.8-1.959963984540054*0.3)) > 1e-12 {
		t.Errorf("own band from the standard error: %+v", o)
	}

	pooled := `{"level": 0.95, "elasticities": [{"product": "all", "own_price": -2, "std_error": 0.1, "ci_low": -2.2, "ci_high": -1.8}]}`
	f, err = ReadEstimateFile(writeTemp(t, "pooled.json", pooled))
	if err != nil {
		t.Fatal(err)
	}
	if !f.Pooled() {
		t.Fatal("pooled file not recognised")
	}
	if _, err := f.Estimates("pooled.json", nil); err == nil || !strings.Contains(err.Error(), "give the products and their prices with --prices FILE") {
		t.Errorf("pooled without products: %v", err)
	}
	est, err = f.Estimates("pooled.json", []string{"a", "b"})
	if err != nil {
		t.Fatal(err)
	}
	// One shared parameter: the delta-method variance of a sum over both
	// products uses the full correlation.
	g := []float64{1, 0, 0, 1}
	if v := est.quadForm(g); math.Abs(v-4*0.01) > 1e-15 {
		t.Errorf("variance of the pooled sum %v, want 0.04", v)
	}

	for _, test := range []struct{ in, want string }{
		{`{"elasticities": [`, "line 1: not valid JSON"},
		{`{"elasticities": [{"product": "vanilla_can", "failed": true, "warnings": ["no price variation"]}]}`, `product "vanilla_can" could not be estimated (no price variation)`},
		{`{"elasticities": [{"product": "a", "own_price": -2}, {"product": "a", "own_price": -3}]}`, `product "a" has two elasticities`},
		{`{"n": 10}`, "holds no elasticities"},
		{`{"cross_price": {"products": ["a", "b"], "matrix": [[1, 2]]}}`, "cross_price.matrix has 1 rows for 2 products"},
	} {
		f, err := ReadEstimateFile(writeTemp(t, "bad.json", test.in))
		if err == nil {
			_, err = f.Estimates("bad.json", nil)
		}
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%s: error %v, want %q", test.in, err, test.want)
		}
	}
}

func TestWritePricing(t *testing.T) {
	f, err := ReadEstimateFile(writeTemp(t, "cross.json", crossJSON))
	if err != nil {
		t.Fatal(err)
	}
	est, _ := f.Estimates("cross.json", nil)
	base := Baseline{Price: []float64{2.49, 3.10}, Quantity: []float64{1200, 800}, UnitCost: []float64{1.1, 1.3}}
	sim, err := Simulate(est, base, []Change{mustChange(t, "oat_latte_can=+5%", est.Products)})
	if err != nil {
		t.Fatal(err)
	}
	rep := &PricingReport{Level: 0.95, Simulation: sim}
	for j := range est.Products {
		rep.Markups = append(rep.Markups, MarkupOf(est.Own(j), base.Price[j], base.UnitCost[j]))
	}
	rep.Line, err = ProductLineMarkups(ProductLine{Products: est.Products, E: est.E, Price: base.Price, Quantity: base.Quantity})
	if err != nil {
		t.Fatal(err)
	}
	for _, format := range Formats {
		var buf bytes.Buffer
		if err := WritePricing(&buf, rep, format); err != nil {
			t.Fatalf("%s: %v", format, err)
		}
		out := buf.String()
		switch format {
		case "json":
			var m map[string]any
			if err := json.Unmarshal(buf.Bytes(), &m); err != nil {
				t.Fatalf("json: %v", err)
			}
			for _, k := range []string{"markups", "simulation", "product_line", "cautions"} {
				if m[k] == nil {
					t.Errorf("json lacks %q", k)
				}
			}
		case "csv":
			recs, err := csv.NewReader(&buf).ReadAll()
			if err != nil {
				t.Fatalf("csv: %v", err)
			}
			if recs[0][0] != "section" || len(recs) < 20 {
				t.Errorf("csv: %d records, header %v", len(recs), recs[0])
			}
		}
		for _, want := range []string{"oat_latte_can", "black_bottle", "constant elasticities", "competition and consumer-protection law"} {
			if !strings.Contains(out, want) {
				t.Errorf("%s output lacks %q", format, want)
			}
		}
	}
	if err := WritePricing(&bytes.Buffer{}, rep, "xlsx"); err == nil {
		t.Error("unknown format accepted")
	}
}

// TestSimulateRefusesFarMoves: a move beyond MaxMoveFactor is refused
// rather than extrapolated.
func TestSimulateRefusesFarMoves(t *testing.T) {
	est := &Estimates{Products: []string{"Mocha Can 250ml"}, E: mat.NewDense(1, 1, []float64{-2}), SE: mat.NewDense(1, 1, []float64{0.1}), Level: 0.95}
	base := Baseline{Price: []float64{2.69}}
	c, err := ParseChange("Mocha Can 250ml=+400%", est.Products)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Simulate(est, base, []Change{c}); err == nil || !strings.Contains(err.Error(), "factor 3") {
		t.Errorf("a five-fold price: %v", err)
	}
}
