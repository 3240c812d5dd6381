package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestConvertSameEstimates converts the cigarette panel to Parquet and
// runs the same model on both files: every number of the JSON output must
// be the same. The model is Stock & Watson, Introduction to Econometrics,
// ch. 12 (1995 cross-section, lnQ on lnP instrumented by SalesTax,
// -1.08 (0.32) with HC1); the check is common practice (a lossless copy
// gives the same estimates).
func TestConvertSameEstimates(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "cig.csv")
	data, err := os.ReadFile(refDir + "cigarettes_state_panel.csv")
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(src, data, 0o644); err != nil {
		t.Fatal(err)
	}
	out, _, err := run(t, "convert", src)
	if err != nil {
		t.Fatal(err)
	}
	pq := filepath.Join(dir, "cig.parquet")
	if want := "wrote " + pq + ": 528 rows, 9 columns (8 numeric, 1 text), "; !strings.HasPrefix(out, want) {
		t.Errorf("output %q, want it to start with %q", out, want)
	}
	model := []string{"--derive", "lnQ=log(PackPC)", "--derive", "lnP=log(AvgPrs/CPI)", "--derive", "SalesTax=(Taxs-Tax)/CPI",
		"--where", "Year == 1995", "--outcome", "lnQ", "--endogenous", "lnP", "--instruments", "SalesTax", "--vcov", "hc1"}
	a := runJSON(t, append([]string{"estimate", src}, model...)...)
	b := runJSON(t, append([]string{"estimate", pq}, model...)...)
	for _, name := range []string{"lnP", "intercept"} {
		ea, sa := coef(t, a, name)
		eb, sb := coef(t, b, name)
		if ea != eb || sa != sb {
			t.Errorf("%s: CSV %v (%v), Parquet %v (%v)", name, ea, sa, eb, sb)
		}
	}
	if e, se := coef(t, b, "lnP"); round(e, 2) != -1.08 || round(se, 2) != 0.32 {
		t.Errorf("elasticity %v (%v), want -1.08 (0.32)", e, se)
	}
}

// TestConvertBadInput: each mistake gets its own message and leaves no
// file behind.
func TestConvertBadInput(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "p.csv")
	if err := os.WriteFile(good, []byte("store,price\nS1,2.5\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("store,price\nS1,2.5,3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, test := range []struct {
		args []string
		want string
		file string // must not exist afterwards
	}{
		{[]string{"convert", good, "--out", filepath.Join(dir, "p.csv")}, "name ending in .parquet", ""},
		{[]string{"convert", filepath.Join(dir, "missing.csv")}, "no such file", filepath.Join(dir, "missing.parquet")},
		{[]string{"convert", bad}, "bad.csv: line 2: wrong number of fields", filepath.Join(dir, "bad.parquet")},
		{[]string{"convert", good, "--out", filepath.Join(dir, "no", "such", "dir", "p.parquet")}, "cannot write", ""},
		{[]string{"convert", good, "--delimiter", "::"}, "delimiter", filepath.Join(dir, "p.parquet")},
	} {
		_, _, err := run(t, test.args...)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%v: error %v, want one containing %q", test.args, err, test.want)
		}
		if test.file != "" {
			if _, err := os.Stat(test.file); err == nil {
				t.Errorf("%v: %s was written", test.args, test.file)
			}
		}
	}
	// Converting a Parquet file onto itself is refused.
	pq := filepath.Join(dir, "p.parquet")
	if _, _, err := run(t, "convert", good, "--out", pq); err != nil {
		t.Fatal(err)
	}
	if _, _, err := run(t, "convert", pq, "--out", pq); err == nil || !strings.Contains(err.Error(), "input file itself") {
		t.Errorf("onto itself: %v", err)
	}
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("temporary file %s left behind", e.Name())
		}
	}
}
