package elasticity_test

import (
	"bytes"
	"encoding/json"
	"html"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/gocarina/gocsv"
	"github.com/xuri/excelize/v2"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
)

// smallDemo is a small cold-brew market (generated-truth data) with the
// given product names, and the specs of the three designs the report
// runs, as priceiv report --demo sets them up.
func smallDemo(t *testing.T, names []string) elasticity.ReportInput {
	t.Helper()
	m, err := demo.Generate(demo.Config{Products: 3, Stores: 30, Weeks: 60, Seed: 11})
	if err != nil {
		t.Fatal(err)
	}
	if names != nil {
		// Rename the products in place (the level labels of the column).
		lv := m.Panel.Text[demo.ColProduct].Levels
		copy(lv, names)
	}
	spec := func(dm demo.Model) demand.Spec {
		s := demand.Spec{Data: "demo", Quantity: dm.Quantity, Price: dm.Price, Form: dm.Form, Controls: dm.Controls,
			Shifters: dm.Shifters, Cluster: dm.Cluster, Product: demo.ColProduct, Unit: demo.ColStore, Time: demo.ColWeek}
		for _, fe := range dm.FixedEffects {
			s.FE = append(s.FE, strings.Join(fe, "*"))
		}
		return s
	}
	pooled := spec(m.Truth.SuggestedModel)
	by := pooled
	by.By = demo.ColProduct
	by.Shifters = []string{demo.ColIngredient}
	by.Controls = []string{demo.ColTemperature, demo.ColPromo, demo.ColBean, demo.ColFreight, demo.ColBottle}
	by.FE = []string{demo.ColStore}
	cross := spec(m.Truth.CrossPriceModel)
	costs := map[string]float64{}
	lv := m.Panel.Text[demo.ColProduct].Levels
	for i, p := range m.Truth.Products {
		// Truth.Products is in catalogue order, as are the levels here.
		costs[lv[i]] = p.MeanMarginalCost
	}
	screen := pooled
	screen.Shifters = []string{demo.ColBean, demo.ColFreight, demo.ColLabel}
	return elasticity.ReportInput{
		Title: "Small market", Panel: m.Panel, Pooled: &pooled, ByProduct: &by, Cross: &cross, Screen: &screen,
		UnitCosts: costs, CostSource: "generator", Bootstrap: 60, Seed: 3,
		Record: elasticity.NewRunRecord("priceiv", "test"),
	}
}

func runSmall(t *testing.T, names []string) (*elasticity.ReportData, string) {
	t.Helper()
	r, err := elasticity.RunReport(smallDemo(t, names))
	if err != nil {
		t.Fatal(err)
	}
	r.Record.Finish()
	dir := filepath.Join(t.TempDir(), "pack")
	if err := elasticity.WriteReport(dir, r); err != nil {
		t.Fatal(err)
	}
	return r, dir
}

func readJSON(t *testing.T, dir string) map[string]any {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, elasticity.ReportJSONFile))
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.UseNumber()
	if err := dec.Decode(&m); err != nil {
		t.Fatal(err)
	}
	return m
}

func TestNumberEncodings(t *testing.T) {
	// Shortest round-trip decimals (strconv 'g', -1): common practice for
	// writing float64 without loss.
	for i, test := range []struct {
		x        float64
		json     string
		csv      string
		backNaN  bool
		backSame bool
	}{
		{x: -2.3171421205380787, json: "-2.3171421205380787", csv: "-2.3171421205380787", backSame: true},
		{x: 0.1, json: "0.1", csv: "0.1", backSame: true},
		{x: 1.1102230246251565e-16, json: "1.1102230246251565e-16", csv: "1.1102230246251565e-16", backSame: true},
		{x: math.NaN(), json: "null", csv: "", backNaN: true},
		{x: math.Inf(-1), json: "null", csv: "", backNaN: true},
	} {
		n := elasticity.Number(test.x)
		j, err := json.Marshal(n)
		if err != nil || string(j) != test.json {
			t.Errorf("%d: JSON %q, %v; want %q", i, j, err, test.json)
		}
		c, _ := n.MarshalCSV()
		if c != test.csv {
			t.Errorf("%d: CSV %q, want %q", i, c, test.csv)
		}
		var back, backC elasticity.Number
		if err := json.Unmarshal(j, &back); err != nil {
			t.Fatal(err)
		}
		if err := backC.UnmarshalCSV(c); err != nil {
			t.Fatal(err)
		}
		for _, b := range []elasticity.Number{back, backC} {
			if test.backNaN && !math.IsNaN(b.F()) || test.backSame && b.F() != test.x {
				t.Errorf("%d: read back %v, want %v", i, b.F(), test.x)
			}
		}
	}
}

// TestReportPackRoundTrips checks the pack against results.json: every
// number of the workbook (read back with excelize, raw values) and of the
// CSV files (read back with gocsv) equals its value in results.json to
// full precision.
func TestReportPackRoundTrips(t *testing.T) {
	r, dir := runSmall(t, nil)
	for _, name := range r.ReportFiles() {
		if st, err := os.Stat(filepath.Join(dir, name)); err != nil || st.Size() == 0 {
			t.Errorf("%s missing or empty: %v", name, err)
		}
	}
	for _, s := range r.Sections {
		if !s.Done {
			t.Errorf("section %s not done: %s", s.Name, s.Reason)
		}
	}
	js := readJSON(t, dir)

	f, err := excelize.OpenFile(filepath.Join(dir, elasticity.ReportXLSXFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sheets := f.GetSheetList()
	for _, name := range r.TableNames() {
		if !containsStr(sheets, name) {
			t.Errorf("workbook has no sheet %s (sheets %v)", name, sheets)
		}
	}
	numbers := 0
	for _, name := range r.TableNames() {
		if name == "run_record" {
			continue
		}
		rows, err := f.GetRows(name, excelize.Options{RawCellValue: true})
		if err != nil {
			t.Fatal(err)
		}
		want, _ := js[name].([]any)
		if len(rows)-1 != len(want) {
			t.Errorf("sheet %s has %d data rows, results.json %d", name, len(rows)-1, len(want))
			continue
		}
		head := rows[0]
		for i, row := range rows[1:] {
			obj := want[i].(map[string]any)
			for j, h := range head {
				jv, ok := obj[h].(json.Number)
				if !ok {
					continue
				}
				cell, _ := excelize.CoordinatesToCellName(j+1, i+2)
				typ, _ := f.GetCellType(name, cell)
				if typ != excelize.CellTypeUnset && typ != excelize.CellTypeNumber {
					t.Errorf("sheet %s cell %s (%s) is not stored as a number", name, cell, h)
				}
				if j >= len(row) {
					t.Errorf("sheet %s row %d: no cell for %s", name, i+2, h)
					continue
				}
				got, err1 := strconv.ParseFloat(row[j], 64)
				w, err2 := strconv.ParseFloat(string(jv), 64)
				if err1 != nil || err2 != nil || got != w {
					t.Errorf("sheet %s cell %s (%s): workbook %q, results.json %s", name, cell, h, row[j], jv)
				}
				numbers++
			}
		}
	}
	if numbers < 300 {
		t.Errorf("compared only %d numbers of the workbook", numbers)
	}
	t.Logf("workbook: %d numbers equal to results.json", numbers)

	// CSV files read back with gocsv into their row types.
	csvBack := func(name string, dst any) {
		t.Helper()
		b, err := os.ReadFile(filepath.Join(dir, name+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if err := gocsv.UnmarshalBytes(b, dst); err != nil {
			t.Fatalf("%s.csv: %v", name, err)
		}
	}
	var el []elasticity.ElasticityRow
	var cr []elasticity.CrossRow
	var mk []elasticity.MarkupRow
	var wi []elasticity.WhatIfRow
	var sh []elasticity.ShifterRow
	var ts []elasticity.TestRow
	csvBack("elasticities", &el)
	csvBack("cross_price", &cr)
	csvBack("markups", &mk)
	csvBack("what_ifs", &wi)
	csvBack("shifters", &sh)
	csvBack("shifter_tests", &ts)
	for _, c := range []struct {
		name      string
		got, want any
	}{
		{"elasticities", el, r.Elasticities}, {"cross_price", cr, r.Cross}, {"markups", mk, r.Markups},
		{"what_ifs", wi, r.WhatIfs}, {"shifters", sh, r.Shifters}, {"shifter_tests", ts, r.Tests},
	} {
		if !sameRows(c.got, c.want) {
			t.Errorf("%s.csv does not read back to the report's rows", c.name)
		}
	}
}

func containsStr(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// sameRows compares two slices of row structs field by field, NaN equal
// to NaN and text cells as neutralised by SafeCell.
func sameRows(a, b any) bool {
	va, vb := reflect.ValueOf(a), reflect.ValueOf(b)
	if va.Len() != vb.Len() {
		return false
	}
	for i := 0; i < va.Len(); i++ {
		ra, rb := va.Index(i), vb.Index(i)
		for j := 0; j < ra.NumField(); j++ {
			fa, fb := ra.Field(j).Interface(), rb.Field(j).Interface()
			switch x := fa.(type) {
			case elasticity.Number:
				y := fb.(elasticity.Number)
				if !(x.F() == y.F() || !x.Finite() && !y.Finite()) {
					return false
				}
			case elasticity.Text:
				if string(x) != elasticity.SafeCell(string(fb.(elasticity.Text))) {
					return false
				}
			default:
				if !reflect.DeepEqual(fa, fb) {
					return false
				}
			}
		}
	}
	return true
}

var numSpan = regexp.MustCompile(`<span class="num[^"]*" data-json="([^"]+)"(?: data-scale="([^"]+)")?(?: data-abs="1")?>([^<]*)</span>`)

// TestReportSummaryMatchesJSON checks every number of the HTML summary
// against results.json: the value at its JSON pointer, scaled as the
// page says, rounded to the decimals shown; and that the summary shows no
// number with decimals that is not tagged so.
func TestReportSummaryMatchesJSON(t *testing.T) {
	_, dir := runSmall(t, nil)
	page0, err := os.ReadFile(filepath.Join(dir, elasticity.ReportHTMLFile))
	if err != nil {
		t.Fatal(err)
	}
	var js map[string]any
	b, _ := os.ReadFile(filepath.Join(dir, elasticity.ReportJSONFile))
	if err := json.Unmarshal(b, &js); err != nil {
		t.Fatal(err)
	}
	page := string(page0)
	start, end := strings.Index(page, `<section id="summary">`), strings.Index(page, `<section id="evidence">`)
	if start < 0 || end < start {
		t.Fatal("no summary section")
	}
	summary := page[start:end]
	checked := 0
	for _, m := range numSpan.FindAllStringSubmatch(summary, -1) {
		ptr, scale, text := m[1], m[2], m[3]
		abs := strings.Contains(m[0], `data-abs="1"`)
		v, err := pointer(js, ptr)
		if err != nil {
			t.Errorf("%s: %v", ptr, err)
			continue
		}
		want := v.(float64)
		if abs {
			want = math.Abs(want)
		}
		if scale != "" {
			s, _ := strconv.ParseFloat(scale, 64)
			want *= s
		}
		shown, dec := shownNumber(t, text)
		if d := math.Abs(shown - want); d > 0.5*math.Pow(10, -float64(dec))+1e-9*math.Max(1, math.Abs(want)) {
			t.Errorf("%s: summary shows %q, results.json %v", ptr, text, want)
		}
		checked++
	}
	if checked < 20 {
		t.Errorf("checked only %d numbers of the summary", checked)
	}
	// The tables of the evidence are tagged the same way.
	all := 0
	for _, m := range numSpan.FindAllStringSubmatch(page, -1) {
		v, err := pointer(js, m[1])
		if err != nil {
			t.Errorf("%s: %v", m[1], err)
			continue
		}
		want := v.(float64)
		if strings.Contains(m[0], `data-abs="1"`) {
			want = math.Abs(want)
		}
		if m[2] != "" {
			s, _ := strconv.ParseFloat(m[2], 64)
			want *= s
		}
		shown, dec := shownNumber(t, m[3])
		if d := math.Abs(shown - want); d > 0.5*math.Pow(10, -float64(dec))+1e-9*math.Max(1, math.Abs(want)) {
			t.Errorf("%s: page shows %q, results.json %v", m[1], m[3], want)
		}
		all++
	}
	t.Logf("%d summary numbers and %d numbers in the whole page equal results.json as rounded", checked, all)
	// No untagged number with decimals (or a percentage) in the summary.
	rest := numSpan.ReplaceAllString(summary, "")
	// Labels (the what-if moves as given, "a 1% higher price") are text.
	rest = regexp.MustCompile(`<span class="label">[^<]*</span>`).ReplaceAllString(rest, "")
	rest = regexp.MustCompile(`<[^>]*>`).ReplaceAllString(rest, " ")
	if m := regexp.MustCompile(`[−-]?\d+\.\d+|\d+%`).FindAllString(rest, -1); len(m) > 0 {
		t.Errorf("summary numbers not tied to results.json: %v", m)
	}
}

func shownNumber(t *testing.T, text string) (float64, int) {
	t.Helper()
	s := strings.NewReplacer("−", "-", ",", "", "%", "", "+", "").Replace(strings.TrimSpace(html.UnescapeString(text)))
	x, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatalf("cannot read %q", text)
	}
	d := 0
	if i := strings.IndexByte(s, '.'); i >= 0 {
		d = len(s) - i - 1
	}
	return x, d
}

func pointer(doc any, ptr string) (any, error) {
	cur := doc
	for _, part := range strings.Split(strings.TrimPrefix(ptr, "/"), "/") {
		switch c := cur.(type) {
		case map[string]any:
			cur = c[part]
		case []any:
			i, err := strconv.Atoi(part)
			if err != nil || i >= len(c) {
				return nil, err
			}
			cur = c[i]
		}
	}
	if _, ok := cur.(float64); !ok {
		return nil, os.ErrNotExist
	}
	return cur, nil
}

// TestReportHostileLabels runs the report with product names holding
// formula text, HTML and CSV specials: they are inert in every output,
// and names with commas and quotes read back unchanged.
func TestReportHostileLabels(t *testing.T) {
	names := []string{`=HYPERLINK("http://example.invalid","x")`, `<script>alert(1)</script> & "Oat", Latte`, `Mocha, "Large"`}
	r, dir := runSmall(t, names)

	page, _ := os.ReadFile(filepath.Join(dir, elasticity.ReportHTMLFile))
	if bytes.Contains(page, []byte("<script>")) {
		t.Error("report.html holds a raw <script> tag from a product name")
	}
	if !bytes.Contains(page, []byte("&lt;script&gt;alert(1)&lt;/script&gt;")) {
		t.Error("report.html does not show the escaped product name")
	}

	// CSV: the formula is neutralised; the others read back unchanged.
	b, _ := os.ReadFile(filepath.Join(dir, "elasticities.csv"))
	var el []elasticity.ElasticityRow
	if err := gocsv.UnmarshalBytes(b, &el); err != nil {
		t.Fatal(err)
	}
	got := map[string]bool{}
	for _, e := range el {
		got[string(e.Product)] = true
	}
	for _, want := range []string{`'` + names[0], names[1], names[2]} {
		if !got[want] {
			t.Errorf("elasticities.csv: no product %q (have %v)", want, got)
		}
	}

	// Workbook: text cells neutralised, names with commas and quotes
	// unchanged, numbers (negative ones too) stored as numbers.
	f, err := excelize.OpenFile(filepath.Join(dir, elasticity.ReportXLSXFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, _ := f.GetRows("elasticities", excelize.Options{RawCellValue: true})
	seen := map[string]bool{}
	for i, row := range rows[1:] {
		seen[row[0]] = true
		typ, _ := f.GetCellType("elasticities", "D"+strconv.Itoa(i+2))
		if row[3] != "" && typ != excelize.CellTypeNumber && typ != excelize.CellTypeUnset {
			t.Errorf("row %d: elasticity %q is not a number cell", i+2, row[3])
		}
		if x, err := strconv.ParseFloat(row[3], 64); row[3] != "" && (err != nil || x >= 0) {
			t.Errorf("row %d: elasticity %q should read as a negative number", i+2, row[3])
		}
	}
	for _, want := range []string{`'` + names[0], names[1], names[2]} {
		if !seen[want] {
			t.Errorf("workbook: no product %q (have %v)", want, seen)
		}
	}
	for _, sheet := range f.GetSheetList() {
		rows, _ := f.GetRows(sheet, excelize.Options{RawCellValue: true})
		for _, row := range rows {
			for _, c := range row {
				if c != "" && strings.ContainsRune("=+-@\t\r", rune(c[0])) {
					if _, err := strconv.ParseFloat(c, 64); err != nil {
						t.Errorf("sheet %s: text cell %q starts with a formula character", sheet, c)
					}
				}
			}
		}
	}
	if len(r.Elasticities) != 4 {
		t.Errorf("%d elasticity rows, want 3 products and the pooled row", len(r.Elasticities))
	}
}

// TestWriteReportSafety checks how the pack is written: a folder that is
// a file is refused; other files in the folder are left alone; a failed
// write leaves the previous pack as it was and no temporary file behind.
func TestWriteReportSafety(t *testing.T) {
	r, dir := runSmall(t, nil)
	file := filepath.Join(t.TempDir(), "not-a-folder")
	os.WriteFile(file, []byte("x"), 0o644)
	err := elasticity.WriteReport(file, r)
	if err == nil || !strings.Contains(err.Error(), "is a file") {
		t.Errorf("writing into a file: %v", err)
	}

	notes := filepath.Join(dir, "notes.txt")
	os.WriteFile(notes, []byte("keep me"), 0o600)
	before, _ := os.ReadFile(filepath.Join(dir, elasticity.ReportHTMLFile))
	// Make one output impossible to write: a folder in its place.
	os.Remove(filepath.Join(dir, "markups.csv"))
	os.Mkdir(filepath.Join(dir, "markups.csv"), 0o755)
	r.Title = "A second run"
	if err := elasticity.WriteReport(dir, r); err == nil {
		t.Fatal("writing over a folder should fail")
	}
	after, _ := os.ReadFile(filepath.Join(dir, elasticity.ReportHTMLFile))
	if !bytes.Equal(before, after) {
		t.Error("a failed run changed report.html")
	}
	if b, _ := os.ReadFile(notes); string(b) != "keep me" {
		t.Error("notes.txt was touched")
	}
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("temporary file left behind: %s", e.Name())
		}
	}
	os.Remove(filepath.Join(dir, "markups.csv"))
	if err := elasticity.WriteReport(dir, r); err != nil {
		t.Fatal(err)
	}
	after, _ = os.ReadFile(filepath.Join(dir, elasticity.ReportHTMLFile))
	if !bytes.Contains(after, []byte("A second run")) {
		t.Error("the second run did not replace report.html")
	}
	if b, _ := os.ReadFile(notes); string(b) != "keep me" {
		t.Error("notes.txt was touched")
	}
}

// TestRunReportSections checks that a part that cannot be computed says
// why instead of failing the report, and that a report with no
// elasticity at all is an error.
func TestRunReportSections(t *testing.T) {
	in := smallDemo(t, nil)
	in.Cross.Unit = ""
	in.ByProduct.Shifters = []string{"no_such_column"}
	r, err := elasticity.RunReport(in)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ name, reason string }{
		{elasticity.SectionProducts, "no_such_column"},
		{elasticity.SectionCross, "--unit"},
	} {
		s := r.SectionByName(c.name)
		if s.Done || !strings.Contains(s.Reason, c.reason) {
			t.Errorf("section %s: done %v, reason %q; want a reason naming %q", c.name, s.Done, s.Reason, c.reason)
		}
	}
	if s := r.SectionByName(elasticity.SectionPooled); !s.Done {
		t.Errorf("pooled section not done: %s", s.Reason)
	}
	// Margins and what-ifs fall back on the pooled elasticity.
	if len(r.Markups) != 3 || len(r.WhatIfs) == 0 {
		t.Errorf("%d markups and %d what-if rows from the pooled elasticity", len(r.Markups), len(r.WhatIfs))
	}
	var out bytes.Buffer
	if err := elasticity.WriteHTML(&out, r); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), "Not in this report") {
		t.Error("the report does not list the missing sections")
	}

	in.Pooled.Price = "no_such_price"
	in.ByProduct = nil
	in.Cross = nil
	if _, err := elasticity.RunReport(in); err == nil || !strings.Contains(err.Error(), "no_such_price") {
		t.Errorf("a report with nothing estimated: %v", err)
	}
}
