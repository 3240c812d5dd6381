package main

import (
	"crypto/sha256"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"priceiv/demand"
	"priceiv/ivcore"
)

func round(x float64, d int) float64 {
	p := math.Pow(10, float64(d))
	return math.Round(x*p) / p
}

// TestCigaretteDemandCommand runs the Stock & Watson, Introduction to
// Econometrics, chapter 12 cigarette demand rows through the command line,
// with the variables built by --derive (diff within state ordered by year)
// and --where; estimates and HC1 standard errors to the printed two
// decimals, first-stage F within 0.1 (reference-data/README.md).
func TestCigaretteDemandCommand(t *testing.T) {
	data := refDir + "cigarettes_state_panel.csv"
	derive := []string{
		"--derive", "lnQ=log(PackPC)",
		"--derive", "lnP=log(AvgPrs/CPI)",
		"--derive", "SalesTax=(Taxs-Tax)/CPI",
		"--derive", "CigTax=Tax/CPI",
		"--derive", "lnInc=log(Income/(POP*CPI))",
		"--derive", "dlnQ=diff(lnQ,10)",
		"--derive", "dlnP=diff(lnP,10)",
		"--derive", "dSalesTax=diff(SalesTax,10)",
		"--derive", "dCigTax=diff(CigTax,10)",
		"--derive", "dlnInc=diff(lnInc,10)",
		"--unit", "State", "--time", "Year", "--where", "Year == 1995", "--vcov", "hc1",
	}
	for i, test := range []struct {
		args   []string
		e, se  float64
		firstF float64
		other  string
		o, ose float64
	}{
		{[]string{"--outcome", "lnQ", "--endogenous", "lnP", "--instruments", "SalesTax"}, -1.08, 0.32, 0, "intercept", 9.72, 1.53},
		{[]string{"--outcome", "lnQ", "--endogenous", "lnP", "--exogenous", "lnInc", "--instruments", "SalesTax"}, -1.14, 0.37, 0, "lnInc", 0.21, 0.31},
		{[]string{"--outcome", "lnQ", "--endogenous", "lnP", "--exogenous", "lnInc", "--instruments", "SalesTax,CigTax"}, -1.28, 0.25, 0, "lnInc", 0.28, 0.25},
		{[]string{"--outcome", "dlnQ", "--endogenous", "dlnP", "--exogenous", "dlnInc", "--instruments", "dSalesTax"}, -0.94, 0.21, 33.70, "dlnInc", 0.53, 0.34},
		{[]string{"--outcome", "dlnQ", "--endogenous", "dlnP", "--exogenous", "dlnInc", "--instruments", "dCigTax"}, -1.34, 0.23, 107.20, "dlnInc", 0.43, 0.30},
		{[]string{"--outcome", "dlnQ", "--endogenous", "dlnP", "--exogenous", "dlnInc", "--instruments", "dSalesTax,dCigTax"}, -1.20, 0.20, 88.60, "dlnInc", 0.46, 0.31},
	} {
		args := append(append([]string{"estimate", data}, derive...), test.args...)
		m := runJSON(t, args...)
		if m["n"].(float64) != 48 {
			t.Fatalf("%d: n = %v, want 48", i, m["n"])
		}
		endog := test.args[3]
		e, se := coef(t, m, endog)
		if round(e, 2) != test.e || round(se, 2) != test.se {
			t.Errorf("%d: elasticity %.4f (%.4f), want %.2f (%.2f)", i, e, se, test.e, test.se)
		}
		o, ose := coef(t, m, test.other)
		if round(o, 2) != test.o || round(ose, 2) != test.ose {
			t.Errorf("%d: %s %.4f (%.4f), want %.2f (%.2f)", i, test.other, o, ose, test.o, test.ose)
		}
		if test.firstF > 0 {
			f := m["first_stage"].([]any)[0].(map[string]any)["f_stat"].(float64)
			if math.Abs(f-test.firstF) > 0.1 {
				t.Errorf("%d: first-stage F %.3f, want %.2f ± 0.1", i, f, test.firstF)
			}
		}
	}
}

// TestEstimateDemo checks that the demo runs and reports a pooled
// elasticity with its band, in every format.
func TestEstimateDemo(t *testing.T) {
	m := runJSON(t, "estimate", "--demo")
	el := m["elasticities"].([]any)[0].(map[string]any)
	if el["product"] != "all" || el["own_price"].(float64) >= -1 {
		t.Errorf("demo elasticity %v", el)
	}
	for _, key := range []string{"n", "estimator", "vcov", "coefficients", "first_stage", "dropped", "absorbed"} {
		if _, ok := m[key]; !ok {
			t.Errorf("JSON lacks %q", key)
		}
	}
	dg, ok := m["diagnostics"].(map[string]any)
	if !ok {
		t.Fatal("JSON lacks the diagnostics object")
	}
	for _, key := range []string{"first_stage", "weak_iv", "overid", "endogeneity", "anderson_rubin"} {
		if dg[key] == nil {
			t.Errorf("diagnostics lack %q", key)
		}
	}
	ar := dg["anderson_rubin"].(map[string]any)
	lo, hi := ar["ci_low"].(float64), ar["ci_high"].(float64)
	if !(lo < el["own_price"].(float64) && el["own_price"].(float64) < hi) || ar["shape"] != "bounded interval" {
		t.Errorf("Anderson-Rubin band %v to %v (%v) does not hold the estimate", lo, hi, ar["shape"])
	}
	for _, f := range []string{"text", "csv", "markdown"} {
		out, _, err := run(t, "estimate", "--demo", "--format", f)
		if err != nil || !strings.Contains(out, "price") {
			t.Errorf("format %s: %v\n%s", f, err, out)
		}
	}
	text, _, _ := run(t, "estimate", "--demo")
	if !strings.HasPrefix(text, "OWN-PRICE ELASTICITY") || !strings.Contains(text, "competition and consumer-protection law") {
		t.Errorf("text output does not lead with the elasticity or lacks the cautions:\n%s", text)
	}
}

// A small panel for error cases: two stores, four weeks.
const smallPanel = `store,week,units,price,cost,freight,promo,promo2,region,size
A,1,100,2.0,1.0,0.5,0,0,north,10
A,2,90,2.2,1.1,0.4,1,2,north,10
A,3,95,2.1,1.2,0.6,0,0,north,10
A,4,80,2.4,1.3,0.5,1,2,north,10
B,1,120,1.9,1.0,0.7,0,0,south,20
B,2,110,2.0,1.1,0.5,1,2,south,20
B,3,105,2.2,1.3,0.6,0,0,south,20
B,4,100,2.3,1.4,0.8,1,2,south,20
`

func TestEstimateBadInput(t *testing.T) {
	good := writeFile(t, "panel.csv", smallPanel)
	for i, test := range []struct {
		name    string
		content string // file content; empty means the good panel
		args    []string
		is      error
		want    []string
	}{
		{"unknown column", "", []string{"--quantity", "unit", "--price", "price", "--shifters", "cost"}, demand.ErrUnknownColumn, []string{`"unit"`, "units"}},
		{"non-numeric cell", strings.Replace(smallPanel, "B,3,105,2.2", "B,3,105,2.2x", 1), []string{"--quantity", "units", "--price", "price", "--shifters", "cost"}, demand.ErrNotNumeric, []string{"line 8", "price", `"2.2x"`}},
		{"infinite cell", strings.Replace(smallPanel, "B,3,105,2.2", "B,3,105,Inf", 1), []string{"--quantity", "units", "--price", "price", "--shifters", "cost"}, demand.ErrNotNumeric, []string{"line 8", `"price"`, "infinite"}},
		{"log of zero", strings.Replace(smallPanel, "A,3,95,", "A,3,0,", 1), []string{"--quantity", "units", "--price", "price", "--shifters", "cost"}, demand.ErrNonPositiveLog, []string{"1 row", "line 4", "--where 'units > 0'"}},
		{"fewer instruments", "", []string{"--outcome", "units", "--endogenous", "price,promo", "--instruments", "cost"}, ivcore.ErrOrderCondition, []string{"2 endogenous", "1 excluded instrument"}},
		{"control constant within effects", "", []string{"--quantity", "units", "--price", "price", "--shifters", "cost", "--controls", "size", "--fe", "store"}, ivcore.ErrNoVariation, []string{`control "size"`, "no variation"}},
		{"instrument constant within effects", "", []string{"--quantity", "units", "--price", "price", "--shifters", "cost,region_code", "--derive", "region_code=week*0+1", "--fe", "store"}, ivcore.ErrNoVariation, []string{"region_code", "no variation"}},
		{"singular design", "", []string{"--quantity", "units", "--price", "price", "--shifters", "cost", "--controls", "promo,promo2"}, ivcore.ErrCollinear, []string{`"promo2"`, `"promo"`}},
		{"absorption does not converge", "", []string{"--quantity", "units", "--price", "price", "--shifters", "cost", "--fe", "store,week", "--max-sweeps", "1"}, nil, []string{"did not converge", "1"}},
		{"empty after filter", "", []string{"--quantity", "units", "--price", "price", "--shifters", "cost", "--where", "week > 10"}, demand.ErrEmpty, []string{"no row", "8 false"}},
		{"duplicate panel keys", strings.Replace(smallPanel, "A,2,90", "A,1,90", 1), []string{"--quantity", "units", "--price", "price", "--shifters", "lcost", "--derive", "lcost=lag(cost,1)", "--unit", "store", "--time", "week"}, demand.ErrDuplicateKey, []string{"line 2", "line 3"}},
	} {
		path := good
		if test.content != "" {
			path = writeFile(t, "bad.csv", test.content)
		}
		out := filepath.Join(t.TempDir(), "result.json")
		args := append([]string{"estimate", path, "--out", out}, test.args...)
		_, _, err := run(t, args...)
		if err == nil {
			t.Errorf("%d %s: no error", i, test.name)
			continue
		}
		if test.is != nil && !errors.Is(err, test.is) {
			t.Errorf("%d %s: error %v is not %v", i, test.name, err, test.is)
		}
		for _, w := range test.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%d %s: error %q lacks %q", i, test.name, err, w)
			}
		}
		if _, err := os.Stat(out); !os.IsNotExist(err) {
			t.Errorf("%d %s: --out was written by a failed run", i, test.name)
		}
	}
}

// TestInputsUnchanged checks that a run never modifies its input file and
// that --out is written whole.
func TestInputsUnchanged(t *testing.T) {
	path := writeFile(t, "panel.csv", smallPanel)
	before := sha256.Sum256([]byte(smallPanel))
	out := filepath.Join(t.TempDir(), "r.json")
	if _, _, err := run(t, "estimate", path, "--quantity", "units", "--price", "price", "--shifters", "cost", "--out", out, "--format", "json"); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(path)
	if sha256.Sum256(b) != before {
		t.Error("input file was modified")
	}
	if st, err := os.Stat(out); err != nil || st.Size() == 0 {
		t.Errorf("--out not written: %v", err)
	}
}

// TestSpecFile checks that a YAML spec repeats a run and that flags
// override it, and that unknown keys are named with the closest key.
func TestSpecFile(t *testing.T) {
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "panel.csv"), []byte(smallPanel), 0o644); err != nil {
		t.Fatal(err)
	}
	spec := filepath.Join(dir, "model.yaml")
	os.WriteFile(spec, []byte("data: panel.csv\nquantity: units\nprice: price\nshifters: [cost]\nvcov: iid\n"), 0o644)
	a := runJSON(t, "estimate", "--spec", spec)
	b := runJSON(t, "estimate", filepath.Join(dir, "panel.csv"), "--quantity", "units", "--price", "price", "--shifters", "cost", "--vcov", "iid")
	ea, _ := coef(t, a, "price")
	eb, _ := coef(t, b, "price")
	if ea != eb || a["vcov"] != "iid" {
		t.Errorf("spec run %v differs from flag run %v", ea, eb)
	}
	c := runJSON(t, "estimate", "--spec", spec, "--vcov", "hc1")
	if c["vcov"] != "hc1" {
		t.Errorf("flag did not override the spec: vcov %v", c["vcov"])
	}
	os.WriteFile(spec, []byte("data: panel.csv\nquantity: units\nprise: price\n"), 0o644)
	_, _, err := run(t, "estimate", "--spec", spec)
	if err == nil || !strings.Contains(err.Error(), `"prise"`) || !strings.Contains(err.Error(), `"price"`) || !strings.Contains(err.Error(), "line 3") {
		t.Errorf("unknown key error: %v", err)
	}
}
