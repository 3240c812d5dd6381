package elasticity

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"strings"
	"testing"

	"priceiv/demand"
)

func fptr(x float64) *float64 { return &x }

// tableFixture is a hand-written per-product table (not an estimate): one
// estimated row with an Anderson-Rubin band, one whose name a
// spreadsheet would read as a formula, and one failed row.
func tableFixture() *demand.ProductTable {
	return &demand.ProductTable{
		Mode: "interact product", ProductColumn: "product", Source: "sales.csv", Form: "log-log",
		Estimator: "2sls", Vcov: "cluster", VcovDetail: "cluster-robust by store (40 clusters)", Level: 0.95,
		Shifters: []string{"ingredient_index"}, Controls: []string{"promo"}, FE: []string{"product*store"}, N: 4000,
		Elasticities: []demand.ProductElasticity{
			{Product: "Original | Bottle", N: 2000, OwnPrice: -2.5, StdError: 0.1, CILow: -2.7, CIHigh: -2.3, Band: "wald", Level: 0.95,
				AR:          &demand.RobustBand{Method: "anderson-rubin", Level: 0.95, Pieces: []demand.Interval{{Low: fptr(-2.75), High: fptr(-2.28)}}},
				FirstStageF: 150, EffectiveF: fptr(150), Warnings: []string{}},
			{Product: "=HYPERLINK(\"x\")", N: 2000, OwnPrice: 0.4, StdError: 0.3, CILow: -0.2, CIHigh: 1.0, Band: "wald", Level: 0.95,
				FirstStageF: 4.2, Warnings: []string{"weak first stage: F = 4.2", "positive own-price elasticity"}},
			{Product: "Mocha", Band: "wald", Level: 0.95, Failed: true, Warnings: []string{"not estimated: no variation"}},
		},
		Equal:   &demand.EqualityTest{Chi2: 8.4, F: 8.4, Q: 1, DF: 39, P: 0.0061},
		Dropped: []demand.Drop{{Reason: "missing value", Column: "units", Rows: 3}},
		Notes:   []string{"a note"},
	}
}

func crossFixture() *demand.CrossPrice {
	return &demand.CrossPrice{
		Products:    []string{"A", "-B"},
		Matrix:      [][]float64{{-2.4, 0.1}, {0.2, -1.9}},
		StdErrors:   [][]float64{{0.1, 0.05}, {0.06, 0.12}},
		CILow:       [][]float64{{-2.6, 0.0}, {0.08, -2.14}},
		CIHigh:      [][]float64{{-2.2, 0.2}, {0.32, -1.66}},
		FirstStageF: [][]float64{{80, 60}, {70, 90}},
		N:           []int{500, 480},
		Band:        "wald", Level: 0.95, Form: "log-log", Estimator: "2sls", Vcov: "cluster", VcovDetail: "cluster-robust by store (30 clusters)",
		Unit: "store", Time: "week", Matched: demand.Matched{Keys: 600, Complete: 500, Pairs: [][]int{{550, 500}, {500, 540}}},
		Specific: []string{"ingredient_index"}, Common: []string{"bean_index"}, Instruments: 3,
		Controls: []string{}, FE: []string{"store"}, Warnings: []string{"only 500 of 600 keys"},
	}
}

func TestWriteProductTableJSON(t *testing.T) {
	var b bytes.Buffer
	if err := WriteProductTable(&b, tableFixture(), "json"); err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Mode         string           `json:"mode"`
		Elasticities []map[string]any `json:"elasticities"`
		Equal        map[string]any   `json:"equal_elasticities"`
		Cautions     []string         `json:"cautions"`
	}
	if err := json.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatalf("%v\n%s", err, b.String())
	}
	if doc.Mode != "interact product" || len(doc.Elasticities) != 3 || doc.Equal["q"] != 1.0 || len(doc.Cautions) != len(Cautions) {
		t.Fatalf("decoded %+v", doc)
	}
	first := doc.Elasticities[0]
	for _, key := range []string{"product", "n", "own_price", "std_error", "ci_low", "ci_high", "band", "ar_band", "first_stage_f", "effective_f", "warnings", "failed"} {
		if _, ok := first[key]; !ok {
			t.Errorf("elasticity row lacks %q", key)
		}
	}
	if doc.Elasticities[1]["ar_band"] != nil || doc.Elasticities[1]["effective_f"] != nil {
		t.Errorf("AR band and effective F not computed should be null: %v", doc.Elasticities[1])
	}
}

func TestWriteProductTableCSV(t *testing.T) {
	var b bytes.Buffer
	if err := WriteProductTable(&b, tableFixture(), "csv"); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 4 || recs[0][0] != "product" || recs[0][8] != "ar_band" {
		t.Fatalf("records %q", recs)
	}
	for i, test := range []struct {
		col  int
		row  int
		want string
	}{
		{0, 1, "Original | Bottle"},
		{2, 1, "-2.5"},
		{8, 1, "[-2.75, -2.28]"},
		{10, 1, "150"},
		{0, 2, `'=HYPERLINK("x")`}, // neutralised formula (SafeCell)
		{10, 2, ""},
		{12, 2, "weak first stage: F = 4.2; positive own-price elasticity"},
		{2, 3, ""},
		{11, 3, "true"},
	} {
		if got := recs[test.row][test.col]; got != test.want {
			t.Errorf("%d: row %d column %s = %q, want %q", i, test.row, recs[0][test.col], got, test.want)
		}
	}
}

func TestWriteProductTableTextMarkdown(t *testing.T) {
	for _, format := range []string{"text", "markdown"} {
		var b bytes.Buffer
		if err := WriteProductTable(&b, tableFixture(), format); err != nil {
			t.Fatal(err)
		}
		out := b.String()
		wants := []string{"-2.700 to -2.300", "-2.750 to -2.280", "n/a", "failed", "positive own-price elasticity", "8.40 on 1 and 39 df", "p = 0.0061", Cautions[2]}
		if format == "markdown" {
			wants = append(wants, `Original \| Bottle`, "|---|---:|")
		} else {
			wants = append(wants, "WATCH", "[2] =HYPERLINK(\"x\"): weak first stage", "dropped      3 rows: missing value (units)", "rejected at 5%")
		}
		for _, w := range wants {
			if !strings.Contains(out, w) {
				t.Errorf("%s output lacks %q:\n%s", format, w, out)
			}
		}
	}
}

func TestWriteCrossPrice(t *testing.T) {
	var b bytes.Buffer
	if err := WriteCrossPrice(&b, crossFixture(), "json"); err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Cross map[string]any `json:"cross_price"`
	}
	if err := json.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	for _, key := range []string{"products", "matrix", "std_errors", "ci_low", "ci_high", "n", "matched", "first_stage_f"} {
		if _, ok := doc.Cross[key]; !ok {
			t.Errorf("cross_price lacks %q", key)
		}
	}

	b.Reset()
	if err := WriteCrossPrice(&b, crossFixture(), "csv"); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	// Long layout: one line per entry, quantity row first.
	if len(recs) != 5 || strings.Join(recs[2], ",") != "A,'-B,0.1,0.05,wald,0.95,0,0.2,60,500" {
		t.Errorf("csv records %q", recs)
	}

	for _, format := range []string{"text", "markdown"} {
		b.Reset()
		if err := WriteCrossPrice(&b, crossFixture(), format); err != nil {
			t.Fatal(err)
		}
		out := b.String()
		for _, w := range []string{"-2.400", "0.200", "500 of 600", "only 500 of 600 keys", Cautions[0]} {
			if !strings.Contains(out, w) {
				t.Errorf("%s output lacks %q:\n%s", format, w, out)
			}
		}
	}
	if err := WriteCrossPrice(&b, crossFixture(), "xlsx"); err == nil || !strings.Contains(err.Error(), "unknown format") {
		t.Errorf("unknown format: %v", err)
	}
}

func TestFormatRobustBand(t *testing.T) {
	for i, test := range []struct {
		b    *demand.RobustBand
		want string
	}{
		{nil, "n/a"},
		{&demand.RobustBand{}, "no value"},
		{&demand.RobustBand{Pieces: []demand.Interval{{}}}, "any value"},
		{&demand.RobustBand{Pieces: []demand.Interval{{High: fptr(-3.1)}, {Low: fptr(0.4)}}}, "up to -3.100 or from 0.400 up"},
		{&demand.RobustBand{Pieces: []demand.Interval{{Low: fptr(-2.61), High: fptr(-2.05)}}}, "-2.610 to -2.050"},
	} {
		if got := FormatRobustBand(test.b); got != test.want {
			t.Errorf("%d: %q, want %q", i, got, test.want)
		}
	}
}
