package supplyshifters

import (
	"encoding/csv"
	"math"
	"os"
	"strconv"
	"testing"

	"priceiv/ivcore"
)

// dgRefDir is the shared reference data beside the repository.
const dgRefDir = "../../shared/reference-data/"

// dgReadRef reads a reference CSV into named numeric columns (NaN for
// empty cells) with encoding/csv and strconv, independent of the
// project's loader. Text columns come back as NaN.
func dgReadRef(t *testing.T, file string) map[string][]float64 {
	t.Helper()
	f, err := os.Open(dgRefDir + file)
	if err != nil {
		t.Fatalf("reference data missing (the project expects ../shared/reference-data beside the repository): %v", err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string][]float64{}
	for _, r := range recs[1:] {
		for j, name := range recs[0] {
			v, err := strconv.ParseFloat(r[j], 64)
			if err != nil {
				v = math.NaN()
			}
			out[name] = append(out[name], v)
		}
	}
	return out
}

// dgStrings reads one text column of a reference CSV.
func dgStrings(t *testing.T, file, col string) []string {
	t.Helper()
	f, err := os.Open(dgRefDir + file)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	j := -1
	for i, name := range recs[0] {
		if name == col {
			j = i
		}
	}
	var out []string
	for _, r := range recs[1:] {
		out = append(out, r[j])
	}
	return out
}

// dgModel accumulates moments of named columns with an intercept and
// returns them with the model: y on endog (instrumented by instr) and
// exog.
func dgModel(cols map[string][]float64, y string, endog, exog, instr []string, dims []ivcore.ClusterDim) (*ivcore.Moments, ivcore.Model) {
	n := len(cols[y])
	ones := make([]float64, n)
	for i := range ones {
		ones[i] = 1
	}
	names := []string{y}
	data := [][]float64{cols[y]}
	add := func(list []string) []int {
		var idx []int
		for _, s := range list {
			idx = append(idx, len(names))
			names = append(names, s)
			if s == "intercept" {
				data = append(data, ones)
			} else {
				data = append(data, cols[s])
			}
		}
		return idx
	}
	md := ivcore.Model{Y: 0}
	md.Endog = add(endog)
	md.Exog = add(append([]string{"intercept"}, exog...))
	md.Instr = add(instr)
	return ivcore.Accumulate(data, names, dims, 2), md
}

// dgMroz returns the MROZ rows with inlf == 1 (n = 428).
func dgMroz(t *testing.T) map[string][]float64 {
	all := dgReadRef(t, "wooldridge_mroz.csv")
	cols := map[string][]float64{}
	for i, v := range all["inlf"] {
		if v != 1 {
			continue
		}
		for _, k := range []string{"lwage", "educ", "exper", "expersq", "motheduc", "fatheduc"} {
			cols[k] = append(cols[k], all[k][i])
		}
	}
	return cols
}

// dgCigarettes returns the Stock & Watson 1995-minus-1985 differences of
// the cigarette panel (48 states), with the README's definitions:
// lnQ = ln(PackPC), lnP = ln(AvgPrs/CPI), SalesTax = (Taxs - Tax)/CPI,
// CigTax = Tax/CPI, lnInc = ln(Income/(POP·CPI)).
func dgCigarettes(t *testing.T) map[string][]float64 {
	raw := dgReadRef(t, "cigarettes_state_panel.csv")
	states := dgStrings(t, "cigarettes_state_panel.csv", "State")
	type rec struct{ lnQ, lnP, st, ct, lnInc float64 }
	by := map[string]map[float64]rec{}
	for i, s := range states {
		if by[s] == nil {
			by[s] = map[float64]rec{}
		}
		cpi := raw["CPI"][i]
		by[s][raw["Year"][i]] = rec{
			lnQ:   math.Log(raw["PackPC"][i]),
			lnP:   math.Log(raw["AvgPrs"][i] / cpi),
			st:    (raw["Taxs"][i] - raw["Tax"][i]) / cpi,
			ct:    raw["Tax"][i] / cpi,
			lnInc: math.Log(raw["Income"][i] / (raw["POP"][i] * cpi)),
		}
	}
	d := map[string][]float64{}
	for i, s := range states {
		if raw["Year"][i] != 1995 {
			continue
		}
		a, b := by[s][1995], by[s][1985]
		d["lnQ"] = append(d["lnQ"], a.lnQ-b.lnQ)
		d["lnP"] = append(d["lnP"], a.lnP-b.lnP)
		d["SalesTax"] = append(d["SalesTax"], a.st-b.st)
		d["CigTax"] = append(d["CigTax"], a.ct-b.ct)
		d["lnInc"] = append(d["lnInc"], a.lnInc-b.lnInc)
	}
	return d
}
