package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// simRun executes a fresh simulate command with args.
func simRun(t *testing.T, args ...string) (string, string, error) {
	t.Helper()
	cmd := newSimulateCmd()
	var out, errb bytes.Buffer
	cmd.SetOut(&out)
	cmd.SetErr(&errb)
	cmd.SetArgs(args)
	_, err := cmd.ExecuteC()
	return out.String(), errb.String(), err
}

func simFile(t *testing.T, dir, name, content string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// simCross is a cross-price estimate of two cold-brew products in the
// layout of priceiv estimate --cross --format json.
const simCross = `{
  "cross_price": {"products": ["oat_latte_can", "black_bottle"], "level": 0.95, "band": "wald",
    "matrix": [[-2, 0.5], [0.3, -3]], "std_errors": [[0.2, 0.1], [0.05, 0.3]],
    "ci_low": [[-2.39, 0.3], [0.2, -3.59]], "ci_high": [[-1.61, 0.7], [0.4, -2.41]]},
  "cautions": []
}`

const simPrices = "product,price,unit_cost,quantity\noat_latte_can,2,1.2,1000\nblack_bottle,4,2.5,500\n"

func TestSimulateCommand(t *testing.T) {
	dir := t.TempDir()
	est := simFile(t, dir, "est.json", simCross)
	prices := simFile(t, dir, "prices.csv", simPrices)

	out, _, err := simRun(t, "--elasticities", est, "--prices", prices, "--change", "oat_latte_can=2.20")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"WHAT IF THE PRICES MOVE", "oat_latte_can   price 2.00 → 2.20 (+10.0%)", "MARGINS AT CURRENT PRICES", "PRODUCT-LINE MARGINS", "READ WITH CARE", "constant elasticities", "consumer-protection law"} {
		if !strings.Contains(out, want) {
			t.Errorf("text output lacks %q:\n%s", want, out)
		}
	}

	out, _, err = simRun(t, "--elasticities", est, "--prices", prices, "--change", "oat_latte_can=2.20", "--format", "json")
	if err != nil {
		t.Fatal(err)
	}
	var m struct {
		Simulation struct {
			Total struct {
				RevenueChange struct{ Estimate float64 } `json:"revenue_change"`
			} `json:"total"`
		} `json:"simulation"`
		Markups struct {
			Products []struct {
				Lerner struct{ Estimate float64 } `json:"lerner"`
			} `json:"products"`
		} `json:"markups"`
	}
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatal(err)
	}
	// Line revenue change by hand (see elasticity.TestSimulateCross):
	// 2000/1.1 - 2000 + 2000·(1.1^0.3 - 1) = -123.806663.
	if math.Abs(m.Simulation.Total.RevenueChange.Estimate-(-123.80666297599191)) > 1e-9 {
		t.Errorf("line revenue change %v", m.Simulation.Total.RevenueChange.Estimate)
	}
	// Inverse-elasticity rule, e = -2 (common practice): L = 0.5.
	if len(m.Markups.Products) != 2 || math.Abs(m.Markups.Products[0].Lerner.Estimate-0.5) > 1e-12 {
		t.Errorf("markups %+v", m.Markups)
	}

	// --out writes the file and nothing to standard output.
	dst := filepath.Join(dir, "whatif.md")
	out, errOut, err := simRun(t, "--elasticities", est, "--prices", prices, "--change", "black_bottle=-3%", "--format", "markdown", "--out", dst)
	if err != nil || out != "" || !strings.Contains(errOut, "wrote "+dst) {
		t.Fatalf("--out: %v, stdout %q, stderr %q", err, out, errOut)
	}
	if b, err := os.ReadFile(dst); err != nil || !strings.Contains(string(b), "### What if the prices move") {
		t.Errorf("written file: %v\n%s", err, b)
	}
}

func TestSimulateCommandErrors(t *testing.T) {
	dir := t.TempDir()
	est := simFile(t, dir, "est.json", simCross)
	prices := simFile(t, dir, "prices.csv", simPrices)
	pooled := simFile(t, dir, "pooled.json", `{"elasticities": [{"product": "all", "own_price": -2, "std_error": 0.1, "ci_low": -2.2, "ci_high": -1.8}]}`)
	for _, test := range []struct {
		name string
		args []string
		want string
	}{
		{"unknown product", []string{"--elasticities", est, "--prices", prices, "--change", "espresso=+5%"},
			`unknown product "espresso" in price change "espresso=+5%"; the products are "oat_latte_can", "black_bottle"`},
		{"bad syntax", []string{"--elasticities", est, "--prices", prices, "--change", "oat_latte_can+5"},
			`write PRODUCT=+5% (raise by 5 percent), PRODUCT=-3% (cut by 3 percent) or PRODUCT=4.20 (a new price)`},
		{"missing product in prices", []string{"--elasticities", est, "--prices", simFile(t, dir, "p1.csv", "product,price\noat_latte_can,2\n"), "--change", "oat_latte_can=+5%"},
			`no line for product "black_bottle"; the model's products are "oat_latte_can", "black_bottle"`},
		{"zero cost", []string{"--elasticities", est, "--prices", simFile(t, dir, "p2.csv", "product,price,unit_cost\noat_latte_can,2,0\nblack_bottle,4,1\n"), "--change", "oat_latte_can=+5%"},
			`p2.csv, line 2, column unit_cost: unit_cost 0 for product "oat_latte_can"`},
		{"negative price", []string{"--elasticities", est, "--prices", simFile(t, dir, "p3.csv", "product,price\noat_latte_can,2\nblack_bottle,-4\n"), "--change", "oat_latte_can=+5%"},
			`p3.csv, line 3, column price: price -4 for product "black_bottle"`},
		{"no prices anywhere", []string{"--elasticities", est, "--change", "oat_latte_can=+5%"},
			`no current price for product "oat_latte_can"`},
		{"pooled without prices", []string{"--elasticities", pooled, "--change", "a=+5%"},
			"holds one elasticity for all products: give the products and their current prices with --prices FILE"},
		{"no change", []string{"--elasticities", est, "--prices", prices},
			`required flag(s) "change" not set`},
		{"bad format", []string{"--elasticities", est, "--prices", prices, "--change", "oat_latte_can=+5%", "--format", "xlsx"},
			`unknown format "xlsx"`},
		{"firm without owners", []string{"--elasticities", est, "--prices", prices, "--change", "oat_latte_can=+5%", "--firm", "us"},
			`--firm "us": the prices file has no owner column`},
	} {
		_, _, err := simRun(t, test.args...)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%s: error %v\nwant it to contain %q", test.name, err, test.want)
		}
	}
}

// TestSimulateCommandSingularLine: a product-line system that cannot be
// solved does not stop the what-if; the report says which products.
func TestSimulateCommandSingularLine(t *testing.T) {
	dir := t.TempDir()
	est := simFile(t, dir, "est.json", `{"cross_price": {"products": ["a", "b"], "matrix": [[-1, 1], [1, -1]], "std_errors": [[0.1, 0.1], [0.1, 0.1]]}}`)
	prices := simFile(t, dir, "prices.csv", "product,price,quantity\na,2,50\nb,2,50\n")
	out, _, err := simRun(t, "--elasticities", est, "--prices", prices, "--change", "a=+5%")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, `product-line margins not shown: the first-order conditions of the line cannot be solved for the margins of "a", "b"`) {
		t.Errorf("no singular-line note:\n%s", out)
	}
}
