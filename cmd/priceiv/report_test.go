package main

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"priceiv/demo"
	"priceiv/elasticity"
)

// reportInputs writes a small generated cold-brew panel, a prices file
// and a spec naming both into a folder, and returns the spec's path and
// the panel's path.
func reportInputs(t *testing.T, extra string) (specPath, panelPath string) {
	t.Helper()
	dir := t.TempDir()
	m, err := demo.Generate(demo.Config{Products: 3, Stores: 30, Weeks: 60, Seed: 5})
	if err != nil {
		t.Fatal(err)
	}
	panelPath = filepath.Join(dir, "sales.csv")
	if err := elasticity.WriteFileAtomic(panelPath, m.WriteCSV); err != nil {
		t.Fatal(err)
	}
	prices := "product,price,unit_cost\n"
	for _, p := range m.Truth.Products {
		prices += `"` + p.Name + `",` + ftoa(p.ReferencePrice) + "," + ftoa(p.UnitCost) + "\n"
	}
	if err := os.WriteFile(filepath.Join(dir, "prices.csv"), []byte(prices), 0o644); err != nil {
		t.Fatal(err)
	}
	spec := `data: sales.csv
quantity: units
price: price
shifters: [ingredient_index]
controls: [temperature, promo, bean_index, freight_index, bottle_index]
product: product
unit: store
time: week
fe: [store]
cluster: [store]
title: Spring review
prices: prices.csv
whatifs: ["` + m.Truth.Products[0].Name + `=+5%", "` + m.Truth.Products[1].Name + `=-3%; ` + m.Truth.Products[2].Name + `=-3%"]
bootstrap: 60
seed: 9
` + extra
	specPath = filepath.Join(dir, "model.yaml")
	if err := os.WriteFile(specPath, []byte(spec), 0o644); err != nil {
		t.Fatal(err)
	}
	return specPath, panelPath
}

func ftoa(x float64) string {
	b, _ := json.Marshal(x)
	return string(b)
}

func sha(t *testing.T, path string) (string, int64) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:]), int64(len(b))
}

func TestReportFromSpec(t *testing.T) {
	spec, panel := reportInputs(t, "")
	out := filepath.Join(t.TempDir(), "meeting")
	stdout, _, err := run(t, "report", "--spec", spec, "--out", out)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(stdout, "wrote "+out) {
		t.Errorf("output: %s", stdout)
	}
	b, err := os.ReadFile(filepath.Join(out, elasticity.ReportJSONFile))
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		Title    string
		Sections []elasticity.Section
		Markups  []struct {
			Product     string
			UnitCost    *float64 `json:"unit_cost"`
			PriceSource string   `json:"price_source"`
		}
		WhatIfs []struct {
			Scenario string
			Product  string
		} `json:"what_ifs"`
		CrossInfo *elasticity.CrossInfo `json:"cross_price_info"`
		Record    elasticity.RunRecord  `json:"run_record"`
	}
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if r.Title != "Spring review" {
		t.Errorf("title %q", r.Title)
	}
	for _, s := range r.Sections {
		switch {
		case s.Name == elasticity.SectionScreen:
			// One shifter in the spec: nothing to screen, and the report
			// says so.
			if s.Done || !strings.Contains(s.Reason, "fewer than two shifters") {
				t.Errorf("screen section: done %v, reason %q", s.Done, s.Reason)
			}
		case !s.Done:
			t.Errorf("section %s not done: %s", s.Name, s.Reason)
		}
	}
	if len(r.Markups) != 3 {
		t.Fatalf("%d markups, want 3", len(r.Markups))
	}
	for _, m := range r.Markups {
		if m.UnitCost == nil || !strings.Contains(m.PriceSource, "prices.csv") {
			t.Errorf("%s: unit cost %v, price from %q; want both from prices.csv", m.Product, m.UnitCost, m.PriceSource)
		}
	}
	scen := map[string]bool{}
	for _, w := range r.WhatIfs {
		scen[w.Scenario] = true
	}
	if len(scen) != 2 {
		t.Errorf("%d what-if scenarios, want the spec's 2: %v", len(scen), scen)
	}
	if r.CrossInfo == nil || r.CrossInfo.Bootstrap < 50 {
		t.Errorf("cross-price bootstrap: %+v", r.CrossInfo)
	}
	// The run record: inputs by content, the specs as used, version, seed.
	rec := r.Record
	if rec.Version != version || rec.Seed != 9 || rec.Bootstrap != 60 {
		t.Errorf("record: version %q seed %d bootstrap %d", rec.Version, rec.Seed, rec.Bootstrap)
	}
	want := map[string]string{"spec": spec, "panel": panel, "prices": filepath.Join(filepath.Dir(spec), "prices.csv")}
	for role, path := range want {
		h, n := sha(t, path)
		found := false
		for _, in := range rec.Inputs {
			if in.Role == role {
				found = true
				if in.SHA256 != h || in.Bytes != n {
					t.Errorf("input %s: recorded %s (%d bytes), file has %s (%d bytes)", role, in.SHA256, in.Bytes, h, n)
				}
			}
		}
		if !found {
			t.Errorf("no %s input in the record: %+v", role, rec.Inputs)
		}
	}
	if len(rec.Specs) != 3 || !strings.Contains(rec.Specs[0].YAML, "quantity: units") {
		t.Errorf("specs as used: %+v", rec.Specs)
	}
	if rec.Started.IsZero() || rec.WallSeconds <= 0 || !strings.Contains(rec.Command, "--spec") {
		t.Errorf("record: started %v, wall %v s, command %q", rec.Started, rec.WallSeconds, rec.Command)
	}
	for _, f := range []string{elasticity.ReportHTMLFile, elasticity.ReportXLSXFile, elasticity.ReportRecordFile, "elasticities.csv", "cross_price.csv", "markups.csv", "what_ifs.csv", "shifters.csv", "run_record.csv"} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Errorf("missing %s", f)
		}
	}
}

func TestReportBadInput(t *testing.T) {
	spec, _ := reportInputs(t, "whatif: [\"x=+5%\"]\n")
	file := filepath.Join(t.TempDir(), "pack")
	os.WriteFile(file, []byte("a file"), 0o644)
	good, _ := reportInputs(t, "")
	for i, test := range []struct {
		args []string
		want []string
	}{
		// An unknown key: named with its line and the closest known key.
		{[]string{"report", "--spec", spec, "--out", t.TempDir()}, []string{`unknown key "whatif"`, `did you mean "whatifs"`, "line 16"}},
		// An output folder that is a file.
		{[]string{"report", "--spec", good, "--out", file}, []string{"is a file, not a folder"}},
		{[]string{"report", "--demo", "--out", file}, []string{"is a file, not a folder"}},
		{[]string{"report", "--demo", "--spec", good, "--out", t.TempDir()}, []string{"demo", "spec"}},
	} {
		_, _, err := run(t, test.args...)
		if err == nil {
			t.Errorf("%d: no error for %v", i, test.args)
			continue
		}
		for _, w := range test.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%d: error %q does not say %q", i, err, w)
			}
		}
	}
	if b, _ := os.ReadFile(file); string(b) != "a file" {
		t.Error("the file given as --out was changed")
	}
}

// TestReportUnknownWhatIfProduct checks that a what-if naming no product
// stops the run before any model is fitted, with the known products named,
// that nothing is written, and that the other files in the folder are left
// alone.
func TestReportUnknownWhatIfProduct(t *testing.T) {
	spec, _ := reportInputs(t, "")
	out := t.TempDir()
	os.WriteFile(filepath.Join(out, "agenda.txt"), []byte("keep"), 0o644)
	_, _, err := run(t, "report", "--spec", spec, "--whatif", "Nitro=+5%", "--whatif", "Nitro=-5%", "--out", out)
	if err == nil || !strings.Contains(err.Error(), `unknown product "Nitro"`) || !strings.Contains(err.Error(), "Oat Latte Can 250ml") {
		t.Fatalf("error %v, want the unknown product and the known ones named", err)
	}
	if _, err := os.Stat(filepath.Join(out, elasticity.ReportJSONFile)); !os.IsNotExist(err) {
		t.Error("a failed run wrote the pack")
	}
	if b, _ := os.ReadFile(filepath.Join(out, "agenda.txt")); string(b) != "keep" {
		t.Error("agenda.txt was touched")
	}
}

func TestReportDemo(t *testing.T) {
	out := t.TempDir()
	stdout, _, err := run(t, "report", "--demo", "--out", out)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(stdout, "not in the report") {
		t.Errorf("the demo report misses a section:\n%s", stdout)
	}
	b, err := os.ReadFile(filepath.Join(out, elasticity.ReportJSONFile))
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		Elasticities []elasticity.ElasticityRow
		Truth        []elasticity.TruthRow `json:"demo_truth"`
		Record       elasticity.RunRecord  `json:"run_record"`
	}
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if len(r.Elasticities) != 7 {
		t.Errorf("%d elasticity rows, want six products and the pooled row", len(r.Elasticities))
	}
	// The demo's default seed is one where every product's band covers
	// its truth (demo.DefaultConfig); the pooled band its estimand.
	covered := 0
	for _, x := range r.Truth {
		if x.Covered {
			covered++
		}
	}
	if len(r.Truth) != 7 || covered != 7 {
		t.Errorf("%d of %d bands cover the demo's true values", covered, len(r.Truth))
	}
	if r.Record.DataSeed != demo.DefaultConfig().Seed || len(r.Record.Inputs) != 1 || len(r.Record.Inputs[0].SHA256) != 64 {
		t.Errorf("record: %+v", r.Record)
	}
}
