package ivcore

import (
	"encoding/csv"
	"math"
	"os"
	"strconv"
	"testing"
)

const refDir = "../../shared/reference-data/"

// readRef reads a reference CSV into named columns (NaN for empty cells)
// with encoding/csv and strconv, independent of the project's loader.
func readRef(t *testing.T, file string) map[string][]string {
	t.Helper()
	f, err := os.Open(refDir + file)
	if err != nil {
		t.Fatalf("reference data missing (the project expects ../shared/reference-data beside the repository): %v", err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string][]string{}
	for _, r := range recs[1:] {
		for j, name := range recs[0] {
			out[name] = append(out[name], r[j])
		}
	}
	return out
}

func num(t *testing.T, s []string) []float64 {
	x := make([]float64, len(s))
	for i, v := range s {
		if v == "" {
			x[i] = math.NaN()
			continue
		}
		f, err := strconv.ParseFloat(v, 64)
		if err != nil {
			t.Fatal(err)
		}
		x[i] = f
	}
	return x
}

// fitCols builds moments from named columns (intercept added) and fits.
func fitCols(t *testing.T, cols map[string][]float64, y string, endog, exog, instr []string, est Estimator, vk VcovKind) *Fit {
	t.Helper()
	n := len(cols[y])
	ones := make([]float64, n)
	for i := range ones {
		ones[i] = 1
	}
	names := []string{y}
	data := [][]float64{cols[y]}
	idx := func(list []string) []int {
		var out []int
		for _, s := range list {
			out = append(out, len(names))
			names = append(names, s)
			data = append(data, cols[s])
		}
		return out
	}
	md := Model{Y: 0}
	md.Endog = idx(endog)
	md.Exog = append(idx([]string{"intercept"}), idx(exog)...)
	data[md.Exog[0]] = ones
	md.Instr = idx(instr)
	m := Accumulate(data, names, nil, 2)
	f, err := Estimate(m, md, est, vk)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func round(x float64, d int) float64 {
	p := math.Pow(10, float64(d))
	return math.Round(x*p) / p
}

// cigarettes returns the Stock & Watson cigarette variables for 1995 and
// the 1995-minus-1985 differences, computed directly here.
func cigarettes(t *testing.T) (y95, d map[string][]float64) {
	raw := readRef(t, "cigarettes_state_panel.csv")
	year := num(t, raw["Year"])
	cpi, pop := num(t, raw["CPI"]), num(t, raw["POP"])
	packs, inc := num(t, raw["PackPC"]), num(t, raw["Income"])
	tax, avg, taxs := num(t, raw["Tax"]), num(t, raw["AvgPrs"]), num(t, raw["Taxs"])
	type rec struct{ lnQ, lnP, st, ct, lnInc float64 }
	by := map[string]map[float64]rec{}
	for i, s := range raw["State"] {
		if by[s] == nil {
			by[s] = map[float64]rec{}
		}
		by[s][year[i]] = rec{
			lnQ:   math.Log(packs[i]),
			lnP:   math.Log(avg[i] / cpi[i]),
			st:    (taxs[i] - tax[i]) / cpi[i],
			ct:    tax[i] / cpi[i],
			lnInc: math.Log(inc[i] / (pop[i] * cpi[i])),
		}
	}
	y95, d = map[string][]float64{}, map[string][]float64{}
	for i, s := range raw["State"] {
		if year[i] != 1995 {
			continue
		}
		a, b := by[s][1995], by[s][1985]
		for k, v := range map[string]float64{"lnQ": a.lnQ, "lnP": a.lnP, "SalesTax": a.st, "CigTax": a.ct, "lnInc": a.lnInc} {
			y95[k] = append(y95[k], v)
		}
		for k, v := range map[string]float64{"lnQ": a.lnQ - b.lnQ, "lnP": a.lnP - b.lnP, "SalesTax": a.st - b.st, "CigTax": a.ct - b.ct, "lnInc": a.lnInc - b.lnInc} {
			d[k] = append(d[k], v)
		}
	}
	return y95, d
}

// TestStockWatsonCigarettes checks the six 2SLS rows of Stock & Watson,
// Introduction to Econometrics, chapter 12 (cigarette demand), as listed in
// shared/reference-data/README.md: estimates and HC1 standard errors to the
// printed two decimals, first-stage robust F within 0.1.
func TestStockWatsonCigarettes(t *testing.T) {
	y95, d := cigarettes(t)
	for i, test := range []struct {
		data       map[string][]float64
		exog       []string
		instr      []string
		e, se      float64 // elasticity and robust s.e., as printed
		other      string
		o, ose     float64
		firstStage float64 // robust first-stage F, as printed (0: not printed)
		source     string
	}{
		{y95, nil, []string{"SalesTax"}, -1.08, 0.32, "intercept", 9.72, 1.53, 0, "Stock & Watson ch. 12, 1995 cross-section, SalesTax (values recalled, re-derived from the file: reference-data README)"},
		{y95, []string{"lnInc"}, []string{"SalesTax"}, -1.14, 0.37, "lnInc", 0.21, 0.31, 0, "Stock & Watson ch. 12, 1995, lnInc control, SalesTax (recalled, re-derived)"},
		{y95, []string{"lnInc"}, []string{"SalesTax", "CigTax"}, -1.28, 0.25, "lnInc", 0.28, 0.25, 0, "Stock & Watson ch. 12, 1995, SalesTax and CigTax (recalled, re-derived)"},
		{d, []string{"lnInc"}, []string{"SalesTax"}, -0.94, 0.21, "lnInc", 0.53, 0.34, 33.70, "Stock & Watson ch. 12, 10-year differences, d SalesTax (recalled, re-derived)"},
		{d, []string{"lnInc"}, []string{"CigTax"}, -1.34, 0.23, "lnInc", 0.43, 0.30, 107.20, "Stock & Watson ch. 12, 10-year differences, d CigTax (recalled, re-derived)"},
		{d, []string{"lnInc"}, []string{"SalesTax", "CigTax"}, -1.20, 0.20, "lnInc", 0.46, 0.31, 88.60, "Stock & Watson ch. 12, 10-year differences, both taxes (recalled, re-derived)"},
	} {
		f := fitCols(t, test.data, "lnQ", []string{"lnP"}, test.exog, test.instr, TSLS, HC1)
		if f.N != 48 {
			t.Fatalf("%d: n = %d, want 48", i, f.N)
		}
		j := f.Index("lnP")
		if round(f.Coef[j], 2) != test.e || round(f.SE(j), 2) != test.se {
			t.Errorf("%d: elasticity %.4f (%.4f), want %.2f (%.2f) [%s]", i, f.Coef[j], f.SE(j), test.e, test.se, test.source)
		}
		o := f.Index(test.other)
		if round(f.Coef[o], 2) != test.o || round(f.SE(o), 2) != test.ose {
			t.Errorf("%d: %s %.4f (%.4f), want %.2f (%.2f)", i, test.other, f.Coef[o], f.SE(o), test.o, test.ose)
		}
		if test.firstStage > 0 {
			md := f.Model
			fs, err := FirstStages(f.Moments(), md, HC1)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(fs[0].F.F-test.firstStage) > 0.1 {
				t.Errorf("%d: first-stage F %.3f, want %.2f ± 0.1", i, fs[0].F.F, test.firstStage)
			}
		}
	}
}

// TestWooldridgeMroz checks Wooldridge, Introductory Econometrics,
// examples 15.1 and 15.5 (MROZ, inlf == 1, n = 428), usual standard errors,
// to the printed precision.
func TestWooldridgeMroz(t *testing.T) {
	raw := readRef(t, "wooldridge_mroz.csv")
	all := map[string][]float64{}
	for _, c := range []string{"inlf", "lwage", "educ", "exper", "expersq", "motheduc", "fatheduc"} {
		all[c] = num(t, raw[c])
	}
	cols := map[string][]float64{}
	for i, v := range all["inlf"] {
		if v != 1 {
			continue
		}
		for k, x := range all {
			cols[k] = append(cols[k], x[i])
		}
	}
	type coef struct {
		name   string
		b, se  float64
		digits int
	}
	for i, test := range []struct {
		what        string
		endog, exog []string
		instr       []string
		est         Estimator
		want        []coef
		source      string
	}{
		{"15.1 OLS", nil, []string{"educ"}, nil, OLS, []coef{{"educ", 0.109, 0.014, 3}}, "Wooldridge, Introductory Econometrics, example 15.1 (recalled, re-derived: reference-data README)"},
		{"15.1 IV", []string{"educ"}, nil, []string{"fatheduc"}, TSLS, []coef{{"educ", 0.059, 0.035, 3}, {"intercept", 0.441, 0.446, 3}}, "Wooldridge, example 15.1, IV with fatheduc (recalled, re-derived)"},
		{"15.5 2SLS", []string{"educ"}, []string{"exper", "expersq"}, []string{"motheduc", "fatheduc"}, TSLS, []coef{
			{"educ", 0.0614, 0.0314, 4}, {"exper", 0.0442, 0.0134, 4}, {"expersq", -0.0009, 0.0004, 4}, {"intercept", 0.0481, 0.4003, 4}},
			"Wooldridge, example 15.5 (recalled, re-derived)"},
	} {
		f := fitCols(t, cols, "lwage", test.endog, test.exog, test.instr, test.est, IID)
		if f.N != 428 {
			t.Fatalf("%s: n = %d, want 428", test.what, f.N)
		}
		for _, c := range test.want {
			j := f.Index(c.name)
			if round(f.Coef[j], c.digits) != c.b || round(f.SE(j), c.digits) != c.se {
				t.Errorf("%d %s: %s = %.5f (%.5f), want %v (%v) [%s]", i, test.what, c.name, f.Coef[j], f.SE(j), c.b, c.se, test.source)
			}
		}
	}
}
