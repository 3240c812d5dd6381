package elasticity

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"math"
	"strings"
	"testing"

	"priceiv/supplyshifters"
)

// TestWriteScreenCells checks the screen writers on a hand-made row: text
// cells that a spreadsheet would run as formulas are neutralised in CSV
// (common practice: a leading quote), undefined numbers are empty cells
// in CSV and null in JSON, and an unbounded Anderson-Rubin set is written
// with its shape.
func TestWriteScreenCells(t *testing.T) {
	lo := -3.5
	nan := supplyshifters.Num(math.NaN())
	res := &supplyshifters.ScreenResult{
		Outcome: "units", Endogenous: "price", Form: "log-log", Candidates: []string{"=HYPERLINK(1)", "-rebate"},
		MaxSet: 1, Combinations: 1, N: 10, Estimator: "2sls", VcovKind: "hc1", Level: 0.95, ElasticityScale: 1,
		Rule: supplyshifters.ScreenRule, LeftOut: "controls",
		Rows: []supplyshifters.ScreenRow{{
			Rank: 1, Shifters: []string{"=HYPERLINK(1)"}, Verdict: supplyshifters.VerdictWeak, Reasons: []string{"-weak"},
			Sign: supplyshifters.SignAsExpected, EffectiveF: 1.5, Critical: 23.1, PartialR2: 0.01, J: nan, JP: nan,
			Elasticity: -2, StdError: 1, WaldLow: -4, WaldHigh: 0, ARShape: supplyshifters.ShapeRay,
			ARLow: &lo, ARPieces: []supplyshifters.Interval{{Low: &lo}}, ARWidth: supplyshifters.Num(math.Inf(1)),
		}},
	}
	var b bytes.Buffer
	if err := WriteScreen(&b, res, "csv"); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	cell := map[string]string{}
	for j, h := range recs[0] {
		cell[h] = recs[1][j]
	}
	for k, want := range map[string]string{"shifters": "'=HYPERLINK(1)", "reasons": "'-weak", "hansen_j_p": "just identified", "hansen_j": "", "ar_high": "", "ar_low": "-3.5", "ar_set": "[-3.500, +∞) half-line", "wald_low": "-4"} {
		if cell[k] != want {
			t.Errorf("csv %s = %q, want %q", k, cell[k], want)
		}
	}
	b.Reset()
	if err := WriteScreen(&b, res, "json"); err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b.Bytes(), &m); err != nil {
		t.Fatal(err)
	}
	row := m["rows"].([]any)[0].(map[string]any)
	if row["hansen_j_p"] != nil || row["ar_width"] != nil || row["ar_high"] != nil || row["ar_low"] != -3.5 {
		t.Errorf("json row %v", row)
	}
	b.Reset()
	if err := WriteScreen(&b, res, "text"); err != nil {
		t.Fatal(err)
	}
	for _, w := range []string{"[-3.500, +∞) half-line", "1.50 ≤ 23.10", "just identified", "1 weak: -weak."} {
		if !strings.Contains(b.String(), w) {
			t.Errorf("text lacks %q:\n%s", w, b.String())
		}
	}
	if err := WriteScreen(&b, res, "xlsx"); err == nil || !strings.Contains(err.Error(), `unknown format "xlsx"`) {
		t.Errorf("unknown format: %v", err)
	}
}
