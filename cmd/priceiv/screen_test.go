package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"priceiv/demo"
)

// TestScreenDemo runs priceiv screen --demo (basis: generated truth, demo
// market) and checks what the command adds to the library: the default
// candidates, temperature moved out of the controls and said so, the same
// rows for every combination said in the output, and the verdicts of the
// truth in the JSON (the full check of the verdicts is
// tests/screen_demo_test.go).
func TestScreenDemo(t *testing.T) {
	text, _, err := run(t, "screen", "--demo")
	if err != nil {
		t.Fatal(err)
	}
	for _, w := range []string{
		"SHIFTER SCREEN",
		"25 combinations of 1 to 3 out of 5 candidates: bean_index, freight_index, bottle_index, label_index, temperature",
		"Every combination is estimated on the same",
		"temperature moved from the demo model's controls to the candidates.",
		"candidates outside a combination stay in its demand equation as controls",
		"HOW THE VERDICTS ARE GIVEN",
		"eff. F vs crit.",
		"just identified",
	} {
		// Sentences are wrapped: compare with runs of spaces and line
		// breaks collapsed.
		if !strings.Contains(strings.Join(strings.Fields(text), " "), w) {
			t.Errorf("text output lacks %q:\n%s", w, text)
		}
	}
	m := runJSON(t, "screen", "--demo")
	rows := m["rows"].([]any)
	if len(rows) != 25 {
		t.Fatalf("%d rows, want 25", len(rows))
	}
	verdict := map[string]string{}
	for _, r := range rows {
		r := r.(map[string]any)
		var names []string
		for _, s := range r["shifters"].([]any) {
			names = append(names, s.(string))
		}
		verdict[strings.Join(names, "+")] = r["verdict"].(string)
	}
	for set, want := range map[string]string{
		"bean_index+freight_index":             "solid",
		"label_index":                          "weak",
		"bean_index+temperature":               "suspect",
		"bean_index+freight_index+temperature": "suspect",
	} {
		if verdict[set] != want {
			t.Errorf("%s: verdict %q, want %q", set, verdict[set], want)
		}
	}
	if first := rows[0].(map[string]any); first["verdict"] != "solid" {
		t.Errorf("first row %v", first["shifters"])
	}
	if ctl := m["controls"].([]any); len(ctl) != 1 || ctl[0] != "promo" {
		t.Errorf("controls %v, want [promo]", ctl)
	}

	// CSV and Markdown, and --out written whole.
	out := filepath.Join(t.TempDir(), "screen.csv")
	_, stderr, err := run(t, "screen", "--demo", "--max-set", "1", "--format", "csv", "--out", out)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	if len(lines) != 6 || !strings.HasPrefix(lines[0], "rank,verdict,shifters,sign_check,f_eff") || !strings.Contains(stderr, "wrote "+out) {
		t.Errorf("csv: %d lines, stderr %q:\n%s", len(lines), stderr, b)
	}
	md, _, err := run(t, "screen", "--demo", "--max-set", "1", "--format", "markdown")
	if err != nil || !strings.Contains(md, "| # | verdict | shifters |") {
		t.Errorf("markdown: %v\n%s", err, md)
	}
}

// TestScreenBadInput checks the messages for the bad inputs of a screen,
// word for word.
func TestScreenBadInput(t *testing.T) {
	dm, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		t.Fatal(err)
	}
	nCols := len(dm.Panel.Columns)
	twelve := "c01,c02,c03,c04,c05,c06,c07,c08,c09,c10,c11,c12"
	for i, test := range []struct {
		args []string
		want string
	}{
		{
			[]string{"--demo", "--candidates", "bean_idx,freight_index,tempreature"},
			fmt.Sprintf(`demo: 2 candidates are not columns: "bean_idx" (closest: bean_index); "tempreature" (closest: temperature); fix the names in --candidates (%d columns in all; priceiv columns FILE lists them)`, nCols),
		},
		{
			[]string{"--demo", "--candidates", "bean_index,zzzzzzzzzzzz"},
			fmt.Sprintf(`demo: a candidate is not a column: "zzzzzzzzzzzz" (no close name); fix the names in --candidates (%d columns in all; priceiv columns FILE lists them)`, nCols),
		},
		{
			// 12 + 66 + 220 = 298 combinations; sets of 2: 78; 10 candidates: 175.
			[]string{"--demo", "--candidates", twelve},
			"screening 12 candidates in combinations of up to 3 (--max-set) means 298 combinations, more than --max-combinations 200; narrow the screen: give at most 10 candidates (drop those you would not defend anyway), or lower --max-set to 2 (78 combinations), or raise --max-combinations to 298",
		},
		{
			// The demo's 25 combinations over a limit of 10: 3 candidates
			// give 7, single shifters 5.
			[]string{"--demo", "--max-combinations", "10"},
			"screening 5 candidates in combinations of up to 3 (--max-set) means 25 combinations, more than --max-combinations 10; narrow the screen: give at most 3 candidates (drop those you would not defend anyway), or lower --max-set to 1 (5 combinations), or raise --max-combinations to 25",
		},
		{
			[]string{"--demo", "--candidates", "bean_index", "--shifters", "freight_index"},
			"--candidates replaces --shifters in a screen: give the shifters to compare once, as --candidates",
		},
		{
			[]string{"--demo", "--candidates", "bean_index,temperature", "--controls", "temperature,promo"},
			`"temperature" is both a control and a candidate shifter: a column is either held fixed or used as a shifter; remove it from --controls (candidates left out of a combination stay in as controls anyway)`,
		},
		{
			[]string{"--demo", "--candidates", "bean_index,bean_index"},
			`candidate "bean_index" is named twice in --candidates: name each once`,
		},
		{
			[]string{"--demo", "--max-set", "0"},
			"--max-set 0: a combination holds at least one shifter; give 1 or more",
		},
		{
			[]string{"--demo", "--expect-sign", "bean_indx=-"},
			"--expect-sign names \"bean_indx\", which is not a candidate (candidates: bean_index, freight_index, bottle_index, label_index, temperature); did you mean bean_index?",
		},
		{
			[]string{"--demo", "--by", "product"},
			"--by is not available in a screen: the screen compares shifters on the pooled model; run priceiv estimate --by with the combination you choose",
		},
	} {
		_, _, err := run(t, append([]string{"screen"}, test.args...)...)
		if err == nil {
			t.Errorf("%d: %v: no error", i, test.args)
			continue
		}
		if err.Error() != test.want {
			t.Errorf("%d: %v:\n got %s\nwant %s", i, test.args, err, test.want)
		}
	}
}

// TestScreenARNeverCrosses screens a panel (invented data) with a shifter
// that is pure noise, under HC1 errors where the Anderson-Rubin set is
// found by numerical search. The statistic never crosses its critical
// value on an open side, so the set must be reported unbounded with its
// shape in words, and the command must end.
func TestScreenARNeverCrosses(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 5))
	var b strings.Builder
	b.WriteString("store,week,units,price,bean,noise\n")
	for s := 0; s < 30; s++ {
		for w := 0; w < 20; w++ {
			bean := rng.NormFloat64()
			v := 0.1 * rng.NormFloat64()
			lp := 1 + 0.05*float64(s%5) + 0.3*bean + v
			lq := 4 - 1.5*lp + 0.5*v + 0.1*rng.NormFloat64()
			fmt.Fprintf(&b, "%d,%d,%.6f,%.6f,%.6f,%.6f\n", s, w, math.Exp(lq), math.Exp(lp), bean, rng.NormFloat64())
		}
	}
	path := writeFile(t, "noise_panel.csv", b.String())
	m := runJSON(t, "screen", path, "--quantity", "units", "--price", "price", "--candidates", "bean,noise", "--fe", "store")
	if m["vcov"] != "hc1" {
		t.Errorf("vcov %v, want hc1", m["vcov"])
	}
	var noise map[string]any
	for _, r := range m["rows"].([]any) {
		r := r.(map[string]any)
		if sh := r["shifters"].([]any); len(sh) == 1 && sh[0] == "noise" {
			noise = r
		}
	}
	if noise == nil {
		t.Fatal("no row for {noise}")
	}
	shape := noise["ar_shape"].(string)
	if shape != "whole line" && shape != "union of two rays" && shape != "half-line" {
		t.Errorf("{noise}: AR shape %q, want an unbounded shape", shape)
	}
	if noise["ar_low"] != nil && noise["ar_high"] != nil {
		t.Errorf("{noise}: AR ends %v, %v; an unbounded set has an open end", noise["ar_low"], noise["ar_high"])
	}
	if noise["verdict"] != "weak" || !strings.Contains(fmt.Sprint(noise["reasons"]), "Anderson-Rubin set is unbounded ("+shape+")") {
		t.Errorf("{noise}: verdict %v, reasons %v", noise["verdict"], noise["reasons"])
	}
	text, _, err := run(t, "screen", path, "--quantity", "units", "--price", "price", "--candidates", "bean,noise", "--fe", "store")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(text, "+∞) "+shape) && !strings.Contains(text, "(−∞, +∞) whole line") {
		t.Errorf("text output does not show the unbounded set with its shape:\n%s", text)
	}
}
