package main

import (
	"bytes"
	"math"
	"strings"
	"testing"

	"priceiv/demo"
)

// TestEstimateMarginsAndBootstrap checks the margins section of the pooled
// demo run against the inverse-elasticity rule (L = -1/e, common practice),
// and that the cluster bootstrap is reproducible for a seed and refuses
// too few replicates.
func TestEstimateMarginsAndBootstrap(t *testing.T) {
	m := runJSON(t, "estimate", "--demo", "--bootstrap", "60", "--seed", "5")
	el := m["elasticities"].([]any)[0].(map[string]any)
	e := el["own_price"].(float64)
	mk := m["markups"].(map[string]any)["products"].([]any)[0].(map[string]any)
	lerner := mk["lerner"].(map[string]any)["estimate"].(float64)
	if math.Abs(lerner+1/e) > 1e-12 {
		t.Errorf("Lerner %.6f, want -1/e = %.6f", lerner, -1/e)
	}
	bb := el["bootstrap"].(map[string]any)
	if bb["replicates"].(float64) != 60 || bb["seed"].(float64) != 5 {
		t.Errorf("bootstrap block %v", bb)
	}
	again := runJSON(t, "estimate", "--demo", "--bootstrap", "60", "--seed", "5")
	bb2 := again["elasticities"].([]any)[0].(map[string]any)["bootstrap"].(map[string]any)
	if bb["ci_low"] != bb2["ci_low"] || bb["ci_high"] != bb2["ci_high"] {
		t.Errorf("same seed, different bands: %v vs %v", bb, bb2)
	}
	_, _, err := run(t, "estimate", "--demo", "--bootstrap", "20")
	if err == nil || !strings.Contains(err.Error(), "at least 50") {
		t.Errorf("--bootstrap 20: %v", err)
	}
	path := writeFile(t, "panel.csv", smallPanel)
	_, _, err = run(t, "estimate", path, "--quantity", "units", "--price", "price", "--shifters", "cost", "--bootstrap", "99")
	if err == nil || !strings.Contains(err.Error(), "--cluster") {
		t.Errorf("bootstrap without clusters: %v", err)
	}
}

// TestEstimateByProductPrices checks --by with a prices file: a product
// missing from the file is named, and unit costs give a profit-maximising
// price p* = c·e/(1+e) (inverse-elasticity rule, common practice).
func TestEstimateByProductPrices(t *testing.T) {
	partial := writeFile(t, "prices.csv", "product,price,unit_cost\nOriginal Bottle 330ml,3.49,2.00\n")
	_, _, err := run(t, "estimate", "--demo", "--by", "product", "--prices", partial)
	if err == nil || !strings.Contains(err.Error(), `"Mocha Can 250ml"`) {
		t.Errorf("missing products not named: %v", err)
	}
	prices := writeFile(t, "prices.csv", `product,price,unit_cost
Original Bottle 330ml,3.49,2.00
Oat Latte Can 250ml,2.99,1.90
Black Nitro Can 250ml,2.89,1.60
Reserve Bottle 500ml,6.99,3.10
Vanilla Bottle 330ml,3.49,2.20
Mocha Can 250ml,2.69,1.80
`)
	m := runJSON(t, "estimate", "--demo", "--by", "product", "--prices", prices)
	found := false
	for _, x := range m["markups"].(map[string]any)["products"].([]any) {
		mk := x.(map[string]any)
		if mk["product"] != "Original Bottle 330ml" {
			continue
		}
		found = true
		e := mk["elasticity"].(map[string]any)["estimate"].(float64)
		pstar := mk["profit_max_price"].(map[string]any)["estimate"].(float64)
		if math.Abs(pstar-2.00*e/(1+e)) > 1e-9 || mk["price"].(float64) != 3.49 {
			t.Errorf("p* = %.6f, want %.6f at price %v", pstar, 2*e/(1+e), mk["price"])
		}
	}
	if !found {
		t.Fatal("no margin row for Original Bottle 330ml")
	}
}

// TestCrossBootstrap: --cross --bootstrap gives joint draws of the whole
// matrix and percentile bands that hold the point estimates (generated
// truth: demo market).
func TestCrossBootstrap(t *testing.T) {
	m := runJSON(t, "estimate", "--demo", "--cross", "--bootstrap", "60", "--seed", "3")
	c := m["cross_price"].(map[string]any)
	b := c["bootstrap"].(map[string]any)
	draws := c["bootstrap_draws"].([]any)
	if b["replicates"].(float64) != 60 || len(draws) != 60 {
		t.Fatalf("replicates %v, draws %d", b["replicates"], len(draws))
	}
	mat := c["matrix"].([]any)
	lo, hi := b["ci_low"].([]any), b["ci_high"].([]any)
	for i := range mat {
		e := mat[i].([]any)[i].(float64)
		l, h := lo[i].([]any)[i].(float64), hi[i].([]any)[i].(float64)
		if !(l < e && e < h) {
			t.Errorf("product %d: own elasticity %.3f outside its bootstrap band %.3f to %.3f", i, e, l, h)
		}
	}
	if len(m["elasticities"].([]any)) != len(mat) {
		t.Error("cross-price output lacks the own-price rows with prices for what-ifs")
	}
}

// TestCrossOwner: with --owner, products of a rival are solved in the
// rival's own first-order conditions, so our product-line margins differ
// from the one-owner case; a product with two owners is refused (generated
// truth: demo market, owners invented for the test).
func TestCrossOwner(t *testing.T) {
	m, err := demo.Generate(demo.Config{Products: 3, Stores: 40, Weeks: 60, Seed: 11})
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := m.WriteCSV(&buf); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(buf.String(), "\n"), "\n")
	rival := m.Truth.Products[2].Name
	for i := range lines {
		switch {
		case i == 0:
			lines[i] += ",owner"
		case strings.HasPrefix(lines[i], rival+",") || strings.HasPrefix(lines[i], `"`+rival+`"`):
			lines[i] += ",rival"
		default:
			lines[i] += ",us"
		}
	}
	path := writeFile(t, "line.csv", strings.Join(lines, "\n")+"\n")
	cm := m.Truth.CrossPriceModel
	args := []string{"estimate", path, "--cross", "--quantity", cm.Quantity, "--price", cm.Price, "--product", "product",
		"--shifters", strings.Join(cm.Shifters, ","), "--controls", strings.Join(cm.Controls, ","),
		"--fe", "store", "--cluster", "store", "--unit", "store", "--time", "week"}
	one := runJSON(t, args...)
	two := runJSON(t, append(args, "--owner", "owner")...)
	rows := func(x map[string]any) map[string]any {
		out := map[string]any{}
		for _, r := range x["product_line"].(map[string]any)["products"].([]any) {
			r := r.(map[string]any)
			out[r["product"].(string)] = r
		}
		return out
	}
	a, b := rows(one), rows(two)
	if b[rival].(map[string]any)["owner"] != "rival" {
		t.Errorf("rival's owner: %v", b[rival])
	}
	est := func(r any) float64 {
		return r.(map[string]any)["lerner"].(map[string]any)["estimate"].(float64)
	}
	ours := m.Truth.Products[0].Name
	if est(a[ours]) == est(b[ours]) {
		t.Errorf("owners did not change the product-line margin of %s: %v", ours, b[ours])
	}
	bad := strings.Replace(strings.Join(lines, "\n"), ",us\n", ",rival\n", 1)
	_, _, err = run(t, append([]string{"estimate", writeFile(t, "bad.csv", bad+"\n")}, append(args[2:], "--owner", "owner")...)...)
	if err == nil || !strings.Contains(err.Error(), "one owner per product") {
		t.Errorf("two owners for one product: %v", err)
	}
}
